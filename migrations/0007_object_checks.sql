-- +goose Up
-- The last time each stored object's bytes were read back and hashed, and what was
-- found, so that `beamledger scrub` can check the objects not checked for a while.
CREATE TABLE object_checks (
    sha256      bytea PRIMARY KEY CHECK (length(sha256) = 32),
    checked_at  timestamptz NOT NULL,
    outcome     text NOT NULL CHECK (outcome IN ('ok', 'missing', 'size_mismatch', 'digest_mismatch', 'unreadable')),
    detail      text NOT NULL DEFAULT '' CHECK (length(detail) <= 1000)
);
CREATE INDEX object_checks_checked_idx ON object_checks (checked_at);

-- +goose Down
DROP TABLE object_checks;
