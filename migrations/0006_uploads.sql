-- +goose Up
-- Resumable uploads (tus 1.0). Each belongs to one pending data file, created with
-- it, so the file has its id from the first byte; the upload row goes when the file
-- is stored, terminated or expired. Only durably stored bytes are counted in
-- upload_offset, which is what a client resumes from.

CREATE TABLE uploads (
    id               uuid PRIMARY KEY,
    data_file_id     uuid NOT NULL UNIQUE REFERENCES data_files (id),
    store            text NOT NULL,
    object_key       text NOT NULL CHECK (length(object_key) BETWEEN 1 AND 1024),
    -- Empty when the declared bytes were stored already: they are then only read
    -- and checked, never stored again.
    multipart_id     text NOT NULL,
    length_bytes     bigint NOT NULL CHECK (length_bytes >= 0),
    upload_offset    bigint NOT NULL DEFAULT 0,
    part_size_bytes  bigint NOT NULL CHECK (part_size_bytes > 0),
    -- [{"number", "etag", "size"}] of the parts stored, in order.
    parts            jsonb NOT NULL DEFAULT '[]' CHECK (jsonb_typeof(parts) = 'array'),
    -- [{"offset", "size"}] of the segment objects holding the unfinished part.
    segments         jsonb NOT NULL DEFAULT '[]' CHECK (jsonb_typeof(segments) = 'array'),
    -- crypto/sha256's marshalled state after upload_offset bytes.
    hash_state       bytea NOT NULL,
    declared_sha256  bytea CHECK (length(declared_sha256) = 32),
    created_by       text NOT NULL,
    created_at       timestamptz NOT NULL,
    last_activity    timestamptz NOT NULL,
    -- One request at a time writes an upload: it holds the lease (a random token
    -- until a time), renewed while it runs, so no connection or row lock is held
    -- through a long request.
    lease_token      uuid,
    lease_until      timestamptz,
    CHECK (upload_offset BETWEEN 0 AND length_bytes),
    CHECK ((lease_token IS NULL) = (lease_until IS NULL))
);
CREATE INDEX uploads_last_activity_idx ON uploads (last_activity);

-- +goose Down
DROP TABLE uploads;
