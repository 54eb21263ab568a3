-- +goose Up
-- Reads behind statements and the utilization report. Each booking's usage is read by
-- booking; without an index on usages.booking_id every such read scans all usage ever
-- recorded. The utilization report reads an instrument's bookings over a period,
-- cancelled ones included, which the exclusion constraint's index (active bookings
-- only) cannot serve.
CREATE INDEX usages_booking_idx ON usages (booking_id, started_at);
CREATE INDEX bookings_instrument_during_idx ON bookings USING gist (instrument_id, during);

-- +goose Down
DROP INDEX bookings_instrument_during_idx;
DROP INDEX usages_booking_idx;
