-- +goose Up
-- Data files and their lineage. A file's bytes live in an object store under their
-- SHA-256; the record says what they are and where they came from. A record is
-- stored only with verified bytes, and a stored record never changes.

CREATE TABLE data_files (
    id              uuid PRIMARY KEY DEFAULT gen_random_uuid(),
    project_id      uuid NOT NULL REFERENCES projects (id),
    acquisition_id  uuid REFERENCES acquisitions (id),
    sha256          bytea CHECK (length(sha256) = 32),
    size_bytes      bigint CHECK (size_bytes >= 0),
    media_type      text NOT NULL CHECK (length(media_type) BETWEEN 1 AND 200),
    file_name       text NOT NULL CHECK (length(file_name) BETWEEN 1 AND 255),
    store           text NOT NULL,
    object_key      text,
    status          text NOT NULL CHECK (status IN ('pending', 'stored')),
    uploaded_by     text NOT NULL,
    created_at      timestamptz NOT NULL,
    stored_at       timestamptz,
    -- Never stored without its digest, size and object.
    CHECK ((status = 'stored') = (sha256 IS NOT NULL AND size_bytes IS NOT NULL AND object_key IS NOT NULL AND stored_at IS NOT NULL))
);
-- The same bytes are recorded once per acquisition (or, for processed files, per
-- project), so a retried upload finds its record instead of making a second one.
CREATE UNIQUE INDEX data_files_acquisition_sha256_key ON data_files (acquisition_id, sha256) WHERE acquisition_id IS NOT NULL AND status = 'stored';
CREATE UNIQUE INDEX data_files_project_sha256_key ON data_files (project_id, sha256) WHERE acquisition_id IS NULL AND status = 'stored';
CREATE INDEX data_files_sha256_idx ON data_files (sha256) WHERE status = 'stored';
CREATE INDEX data_files_project_idx ON data_files (project_id, created_at);

-- A stored record is final; a pending one may only become stored (or be removed when
-- its upload is abandoned).
-- +goose StatementBegin
CREATE FUNCTION data_files_guard() RETURNS trigger LANGUAGE plpgsql AS $$
BEGIN
    IF OLD.status = 'stored' THEN
        RAISE EXCEPTION 'data_files: a stored file is final; % refused', TG_OP USING ERRCODE = 'restrict_violation';
    END IF;
    IF TG_OP = 'UPDATE' AND (NEW.id, NEW.project_id, NEW.acquisition_id, NEW.file_name, NEW.uploaded_by, NEW.created_at)
        IS DISTINCT FROM (OLD.id, OLD.project_id, OLD.acquisition_id, OLD.file_name, OLD.uploaded_by, OLD.created_at) THEN
        RAISE EXCEPTION 'data_files: only the upload result of a pending file may be set' USING ERRCODE = 'restrict_violation';
    END IF;
    IF TG_OP = 'DELETE' THEN
        RETURN OLD;
    END IF;
    RETURN NEW;
END;
$$;
-- +goose StatementEnd
CREATE TRIGGER data_files_final BEFORE UPDATE OR DELETE ON data_files FOR EACH ROW EXECUTE FUNCTION data_files_guard();
CREATE TRIGGER data_files_no_truncate BEFORE TRUNCATE ON data_files EXECUTE FUNCTION refuse_change();

-- A processing step: inputs, software and parameters, producing one output file.
CREATE TABLE derivations (
    id                uuid PRIMARY KEY DEFAULT gen_random_uuid(),
    project_id        uuid NOT NULL REFERENCES projects (id),
    output_file_id    uuid NOT NULL UNIQUE REFERENCES data_files (id),
    software          text NOT NULL CHECK (length(software) BETWEEN 1 AND 200),
    software_version  text NOT NULL CHECK (length(software_version) BETWEEN 1 AND 100),
    parameters        jsonb NOT NULL CHECK (jsonb_typeof(parameters) = 'object'),
    operator_id       uuid NOT NULL REFERENCES users (id),
    performed_at      timestamptz NOT NULL,
    notes             text NOT NULL DEFAULT '' CHECK (length(notes) <= 4000),
    recorded_by       text NOT NULL,
    created_at        timestamptz NOT NULL
);
CREATE TABLE derivation_inputs (
    derivation_id  uuid NOT NULL REFERENCES derivations (id),
    input_file_id  uuid NOT NULL REFERENCES data_files (id),
    position       int NOT NULL CHECK (position >= 0),
    PRIMARY KEY (derivation_id, input_file_id)
);
CREATE INDEX derivation_inputs_input_idx ON derivation_inputs (input_file_id);
CREATE TRIGGER derivations_append_only BEFORE UPDATE OR DELETE ON derivations FOR EACH ROW EXECUTE FUNCTION refuse_change();
CREATE TRIGGER derivation_inputs_append_only BEFORE UPDATE OR DELETE ON derivation_inputs FOR EACH ROW EXECUTE FUNCTION refuse_change();
CREATE TRIGGER derivations_no_truncate BEFORE TRUNCATE ON derivations EXECUTE FUNCTION refuse_change();
CREATE TRIGGER derivation_inputs_no_truncate BEFORE TRUNCATE ON derivation_inputs EXECUTE FUNCTION refuse_change();

-- +goose Down
DROP TABLE derivation_inputs;
DROP TABLE derivations;
DROP TABLE data_files;
DROP FUNCTION data_files_guard();
