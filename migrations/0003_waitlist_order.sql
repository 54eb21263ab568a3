-- +goose Up
-- Waitlist entries made in the same instant are still first come, first served: a
-- sequence orders them where created_at ties.
ALTER TABLE waitlist_entries ADD COLUMN seq bigint GENERATED ALWAYS AS IDENTITY;
DROP INDEX waitlist_instrument_idx;
CREATE INDEX waitlist_instrument_idx ON waitlist_entries (instrument_id, seq) WHERE status IN ('waiting', 'offered');

-- +goose Down
DROP INDEX waitlist_instrument_idx;
ALTER TABLE waitlist_entries DROP COLUMN seq;
CREATE INDEX waitlist_instrument_idx ON waitlist_entries (instrument_id, created_at) WHERE status IN ('waiting', 'offered');
