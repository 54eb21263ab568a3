-- +goose Up
-- A statement's lines are kept once: in the ledger event that recorded it, whose
-- state is the whole statement record, every line included. Until now each line was
-- also a row of statement_lines, written (and for a recomputed draft deleted and
-- written again) beside the event: a month's statements for a facility are tens of
-- thousands of lines, and writing them twice, each row checked by a trigger and three
-- foreign keys, was most of the time a month's statements took.
--
-- statements.event_seq names the event holding the statement as it stands (the
-- create or correct event of the draft, the issue event once issued). An issued
-- statement's row cannot change (statements_final), so neither can the event it
-- names, and ledger events never change at all: the issued lines are as final as
-- before, and now also under the ledger's signed tree. instrument_totals keeps, per
-- instrument, the sum of the lines naming it, for the recovery report.
ALTER TABLE statements ADD COLUMN event_seq bigint REFERENCES ledger_events (seq);
ALTER TABLE statements ADD COLUMN instrument_totals jsonb NOT NULL DEFAULT '{}'::jsonb;
-- The SHA-256 of the event's state (the record's canonical JSON), so that recomputing
-- a draft that comes out the same writes nothing. Unknown (NULL) for statements made
-- before: their next recomputation writes an event, as it always did.
ALTER TABLE statements ADD COLUMN state_sha256 bytea CHECK (state_sha256 IS NULL OR length(state_sha256) = 32);

-- Every statement so far had a ledger event for each change, holding its record.
-- Point each at its latest, and refuse to go on if that event does not hold what the
-- row and the lines say: nothing is dropped that the ledger does not hold.
ALTER TABLE statements DISABLE TRIGGER statements_final;
UPDATE statements s SET event_seq = (
    SELECT e.seq FROM ledger_events e
    WHERE e.entity_type = 'statement' AND e.entity_id = s.id::text
    ORDER BY e.seq DESC LIMIT 1);
UPDATE statements s SET instrument_totals = t.totals
FROM (SELECT statement_id, jsonb_object_agg(instrument_id::text, total) AS totals
      FROM (SELECT statement_id, instrument_id, sum(amount_minor) AS total FROM statement_lines
            WHERE instrument_id IS NOT NULL GROUP BY statement_id, instrument_id) per_instrument
      GROUP BY statement_id) t
WHERE t.statement_id = s.id;
ALTER TABLE statements ENABLE TRIGGER statements_final;

-- +goose StatementBegin
DO $$
DECLARE
    bad uuid;
BEGIN
    SELECT s.id INTO bad
    FROM statements s
    LEFT JOIN ledger_events e ON e.seq = s.event_seq
    LEFT JOIN LATERAL (SELECT convert_from(e.leaf, 'UTF8')::jsonb -> 'state' AS state) ev ON true
    WHERE e.seq IS NULL
       OR ev.state ->> 'id' IS DISTINCT FROM s.id::text
       OR ev.state ->> 'status' IS DISTINCT FROM s.status
       OR (ev.state ->> 'total_minor')::bigint IS DISTINCT FROM s.total_minor
       OR (SELECT count(*) FROM statement_lines l WHERE l.statement_id = s.id) <>
          CASE WHEN jsonb_typeof(ev.state -> 'lines') = 'array' THEN jsonb_array_length(ev.state -> 'lines') ELSE 0 END
    LIMIT 1;
    IF FOUND THEN
        RAISE EXCEPTION 'statement %: no ledger event holds the statement as its row and lines stand; nothing migrated', bad;
    END IF;
END;
$$;
-- +goose StatementEnd

ALTER TABLE statements ALTER COLUMN event_seq SET NOT NULL;
DROP TABLE statement_lines;
DROP FUNCTION statement_lines_issued_final();

-- A statement's event is large (a month's lines, about 400 bytes each before
-- compression). LZ4 compresses such values about twice as fast as the default pglz;
-- servers built without it keep pglz. It applies to values written from now on.
-- +goose StatementBegin
DO $$
BEGIN
    IF EXISTS (SELECT 1 FROM pg_settings WHERE name = 'default_toast_compression' AND 'lz4' = ANY (enumvals)) THEN
        ALTER TABLE ledger_events ALTER COLUMN leaf SET COMPRESSION lz4;
    END IF;
END;
$$;
-- +goose StatementEnd

-- +goose Down
ALTER TABLE ledger_events ALTER COLUMN leaf SET COMPRESSION default;
CREATE TABLE statement_lines (
    statement_id           uuid NOT NULL REFERENCES statements (id),
    line_no                int NOT NULL CHECK (line_no >= 1),
    booking_id             uuid REFERENCES bookings (id),
    instrument_id          uuid REFERENCES instruments (id),
    booking_kind           text,
    booking_start          timestamptz,
    component              text NOT NULL CHECK (component IN ('instrument_time', 'staff_time', 'late_cancellation', 'no_show', 'monthly_cap', 'adjustment')),
    rule                   text NOT NULL,
    from_at                timestamptz,
    to_at                  timestamptz,
    minutes                int NOT NULL CHECK (minutes >= 0),
    hourly_rate_minor      bigint NOT NULL CHECK (hourly_rate_minor >= 0),
    amount_minor           bigint NOT NULL,
    reason                 text NOT NULL DEFAULT '',
    adjustment_id          uuid,
    corrects_statement_id  uuid,
    allocations            jsonb NOT NULL,
    PRIMARY KEY (statement_id, line_no)
);
CREATE INDEX statement_lines_instrument_idx ON statement_lines (instrument_id) WHERE instrument_id IS NOT NULL;
INSERT INTO statement_lines
SELECT s.id, (l ->> 'line_no')::int, (l ->> 'booking_id')::uuid, (l ->> 'instrument_id')::uuid, l ->> 'booking_kind',
       (l ->> 'booking_start')::timestamptz, l ->> 'component', l ->> 'rule', (l ->> 'from')::timestamptz, (l ->> 'to')::timestamptz,
       (l ->> 'minutes')::int, (l ->> 'hourly_rate_minor')::bigint, (l ->> 'amount_minor')::bigint, coalesce(l ->> 'reason', ''),
       (l ->> 'adjustment_id')::uuid, (l ->> 'corrects_statement_id')::uuid, coalesce(l -> 'allocations', '[]'::jsonb)
FROM statements s
JOIN ledger_events e ON e.seq = s.event_seq
CROSS JOIN LATERAL jsonb_array_elements(
    CASE WHEN jsonb_typeof(convert_from(e.leaf, 'UTF8')::jsonb -> 'state' -> 'lines') = 'array'
         THEN convert_from(e.leaf, 'UTF8')::jsonb -> 'state' -> 'lines' ELSE '[]'::jsonb END) l;
-- +goose StatementBegin
CREATE FUNCTION statement_lines_issued_final() RETURNS trigger LANGUAGE plpgsql AS $$
BEGIN
    IF EXISTS (SELECT 1 FROM statements s WHERE s.status = 'issued'
               AND s.id IN (OLD.statement_id, NEW.statement_id)) THEN
        RAISE EXCEPTION 'the lines of issued statement % cannot change: % refused',
            coalesce(OLD.statement_id, NEW.statement_id), TG_OP USING ERRCODE = 'restrict_violation';
    END IF;
    RETURN CASE WHEN TG_OP = 'DELETE' THEN OLD ELSE NEW END;
END;
$$;
-- +goose StatementEnd
CREATE TRIGGER statement_lines_final BEFORE INSERT OR UPDATE OR DELETE ON statement_lines FOR EACH ROW EXECUTE FUNCTION statement_lines_issued_final();
CREATE TRIGGER statement_lines_no_truncate BEFORE TRUNCATE ON statement_lines EXECUTE FUNCTION refuse_change();
ALTER TABLE statements DISABLE TRIGGER statements_final;
ALTER TABLE statements DROP COLUMN instrument_totals;
ALTER TABLE statements DROP COLUMN state_sha256;
ALTER TABLE statements DROP COLUMN event_seq;
ALTER TABLE statements ENABLE TRIGGER statements_final;
