package scheduling

// AppendCanonicalJSON appends the booking's RFC 8785 canonical JSON to dst: the bytes
// the general way (encoding/json, then RFC 8785 canonicalization) gives, written
// directly, since every booking change puts the booking in a ledger event and the
// general way (reflection, then parsing and rewriting its output) cost a booking's
// creation about a tenth of its processor time in this process. Members go in
// RFC 8785 order (the keys are ASCII, so code-unit order is byte order), empty
// optional ones left out as encoding/json leaves them out. It returns an error, and
// dst unchanged in meaning, for values it does not cover (see canonWriter); the
// ledger then uses the general way.
func (b Booking) AppendCanonicalJSON(dst []byte) ([]byte, error) {
	w := canonWriter{b: dst}
	sep := byte('{')
	member := func(key string) {
		w.b = append(w.b, sep, '"')
		w.b = append(w.b, key...)
		w.b = append(w.b, '"', ':')
		sep = ','
	}
	optional := func(key, v string) {
		if v != "" {
			member(key)
			w.str(v)
		}
	}
	optional("cancel_reason", b.CancelReason)
	if b.CancelledAt != nil {
		member("cancelled_at")
		w.time(*b.CancelledAt)
	}
	optional("cancelled_by", b.CancelledBy)
	member("created_at")
	w.time(b.CreatedAt)
	member("created_by")
	w.str(b.CreatedBy)
	if len(b.Displaced) > 0 {
		member("displaced")
		for i, id := range b.Displaced {
			if i == 0 {
				w.b = append(w.b, '[')
			} else {
				w.b = append(w.b, ',')
			}
			w.str(id)
		}
		w.b = append(w.b, ']')
	}
	member("end")
	w.time(b.End)
	member("id")
	w.str(b.ID)
	member("instrument_id")
	w.str(b.InstrumentID)
	member("kind")
	w.str(string(b.Kind))
	optional("note", b.Note)
	optional("project_id", b.ProjectID)
	optional("series_id", b.SeriesID)
	optional("staff_id", b.StaffID)
	member("start")
	w.time(b.Start)
	member("status")
	w.str(string(b.Status))
	member("updated_at")
	w.time(b.UpdatedAt)
	member("user_id")
	w.str(b.UserID)
	w.b = append(w.b, '}')
	if w.err != nil {
		return dst, w.err
	}
	return w.b, nil
}
