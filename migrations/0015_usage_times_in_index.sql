-- +goose Up
-- A booking's usages are read by booking for their times: a month's statements read
-- each project's bookings in order and look up each one's usages. The unique index on
-- (booking_id, ordinal) now holds the times as well, so such a lookup is answered
-- from the index without visiting the table, on every page vacuum has marked
-- all-visible (an index-only scan). Check-out writes ended_at, which
-- usages_no_overlap and usages_open_key hold already, so no update becomes dearer.
ALTER TABLE usages DROP CONSTRAINT usages_booking_ordinal_key,
    ADD CONSTRAINT usages_booking_ordinal_key UNIQUE (booking_id, ordinal) INCLUDE (started_at, ended_at);

-- +goose Down
ALTER TABLE usages DROP CONSTRAINT usages_booking_ordinal_key,
    ADD CONSTRAINT usages_booking_ordinal_key UNIQUE (booking_id, ordinal);
