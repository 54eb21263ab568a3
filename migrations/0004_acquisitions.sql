-- +goose Up
-- Acquisitions: what an instrument was doing while data were recorded, the corrector
-- tunings and calibrations in force, and the specimens the beam fell on. An auditor
-- relies on these records, so they are append-only: a correction is a new version,
-- and the database refuses UPDATE and DELETE on every table below.

-- How the facility classifies detector signals (optics.Settings as JSON; {} = defaults).
ALTER TABLE facility ADD COLUMN optics_settings jsonb NOT NULL DEFAULT '{}';

-- Limits that acquisitions on an instrument are checked against, and whether a
-- condition outside them is refused ('error') or accepted with a warning ('warning').
ALTER TABLE instruments
    ADD COLUMN camera_length_min_m double precision CHECK (camera_length_min_m > 0),
    ADD COLUMN camera_length_max_m double precision CHECK (camera_length_max_m > 0),
    ADD COLUMN condition_checks text NOT NULL DEFAULT 'error' CHECK (condition_checks IN ('error', 'warning')),
    ADD CONSTRAINT instruments_camera_length_range CHECK (camera_length_min_m <= camera_length_max_m);

-- +goose StatementBegin
CREATE FUNCTION refuse_change() RETURNS trigger LANGUAGE plpgsql AS $$
BEGIN
    RAISE EXCEPTION '% is append-only: % refused', TG_TABLE_NAME, TG_OP
        USING ERRCODE = 'restrict_violation';
END;
$$;
-- +goose StatementEnd

CREATE TABLE specimens (
    id                        uuid PRIMARY KEY DEFAULT gen_random_uuid(),
    project_id                uuid NOT NULL REFERENCES projects (id),
    code                      text NOT NULL CHECK (code ~ '^[A-Za-z0-9][A-Za-z0-9._-]{0,63}$'),
    description               text NOT NULL DEFAULT '' CHECK (length(description) <= 2000),
    -- Electrons per square ångström past which acquisitions are accepted with a warning.
    fluence_budget_e_per_a2   double precision CHECK (fluence_budget_e_per_a2 > 0),
    created_by                uuid NOT NULL REFERENCES users (id),
    created_at                timestamptz NOT NULL,
    UNIQUE (project_id, code)
);

-- A corrector's measured aberration coefficients at one instant. A wrong tuning is
-- corrected by a new one that names it; the one it corrects is then never in force.
CREATE TABLE tunings (
    id                 uuid PRIMARY KEY DEFAULT gen_random_uuid(),
    instrument_id      uuid NOT NULL REFERENCES instruments (id),
    measured_at        timestamptz NOT NULL,
    coefficients       jsonb NOT NULL CHECK (jsonb_typeof(coefficients) = 'array' AND jsonb_array_length(coefficients) > 0),
    voltage_v          double precision CHECK (voltage_v > 0),
    notes              text NOT NULL DEFAULT '' CHECK (length(notes) <= 4000),
    recorded_by        text NOT NULL,
    recorded_at        timestamptz NOT NULL,
    corrects           uuid UNIQUE REFERENCES tunings (id),
    correction_reason  text CHECK (length(correction_reason) BETWEEN 1 AND 1000),
    CHECK ((corrects IS NULL) = (correction_reason IS NULL))
);
CREATE INDEX tunings_instrument_idx ON tunings (instrument_id, measured_at DESC);

-- Effective-from measurements. The subject says what was measured: the nominal camera
-- length for 'camera_length', the magnification for 'pixel_size', the detector name
-- for 'detector_angles'. The newest one for a subject, not itself corrected, is in force.
CREATE TABLE calibrations (
    id                 uuid PRIMARY KEY DEFAULT gen_random_uuid(),
    instrument_id      uuid NOT NULL REFERENCES instruments (id),
    kind               text NOT NULL CHECK (kind IN ('camera_length', 'pixel_size', 'detector_angles')),
    subject            text NOT NULL CHECK (length(subject) BETWEEN 1 AND 100),
    effective_from     timestamptz NOT NULL,
    nominal_camera_length_m   double precision CHECK (nominal_camera_length_m > 0),
    camera_length_m           double precision CHECK (camera_length_m > 0),
    magnification             double precision CHECK (magnification > 0),
    pixel_size_m              double precision CHECK (pixel_size_m > 0),
    detector                  text,
    inner_angle_rad           double precision CHECK (inner_angle_rad >= 0 AND inner_angle_rad < 1),
    outer_angle_rad           double precision CHECK (outer_angle_rad > 0 AND outer_angle_rad < 1.6),
    uncertainty_fraction      double precision CHECK (uncertainty_fraction >= 0 AND uncertainty_fraction < 1),
    notes              text NOT NULL DEFAULT '' CHECK (length(notes) <= 4000),
    recorded_by        text NOT NULL,
    recorded_at        timestamptz NOT NULL,
    corrects           uuid UNIQUE REFERENCES calibrations (id),
    correction_reason  text CHECK (length(correction_reason) BETWEEN 1 AND 1000),
    CHECK ((corrects IS NULL) = (correction_reason IS NULL)),
    CHECK (kind <> 'camera_length' OR (nominal_camera_length_m IS NOT NULL AND camera_length_m IS NOT NULL)),
    CHECK (kind <> 'pixel_size' OR (magnification IS NOT NULL AND pixel_size_m IS NOT NULL)),
    CHECK (kind <> 'detector_angles' OR (detector IS NOT NULL AND inner_angle_rad IS NOT NULL
                                         AND outer_angle_rad IS NOT NULL AND inner_angle_rad < outer_angle_rad))
);
CREATE INDEX calibrations_instrument_idx ON calibrations (instrument_id, kind, subject, effective_from DESC);

-- An acquisition's identity: the booking it belongs to, and so its instrument, project
-- and booking user. What was recorded lives in its versions.
CREATE TABLE acquisitions (
    id             uuid PRIMARY KEY DEFAULT gen_random_uuid(),
    booking_id     uuid NOT NULL REFERENCES bookings (id),
    instrument_id  uuid NOT NULL REFERENCES instruments (id),
    project_id     uuid NOT NULL REFERENCES projects (id),
    user_id        uuid NOT NULL REFERENCES users (id),
    created_by     text NOT NULL,
    created_at     timestamptz NOT NULL
);
CREATE INDEX acquisitions_booking_idx ON acquisitions (booking_id);
CREATE INDEX acquisitions_project_idx ON acquisitions (project_id, created_at);
CREATE INDEX acquisitions_instrument_idx ON acquisitions (instrument_id, created_at);

-- Version 1 is the record as first made; each later version is a correction with its
-- reason and author. Reads show the newest; history shows all.
CREATE TABLE acquisition_versions (
    acquisition_id     uuid NOT NULL REFERENCES acquisitions (id),
    version            int NOT NULL CHECK (version >= 1),
    operator_id        uuid NOT NULL REFERENCES users (id),
    specimen_id        uuid REFERENCES specimens (id),
    started_at         timestamptz NOT NULL,
    ended_at           timestamptz NOT NULL CHECK (ended_at > started_at),
    notes              text NOT NULL DEFAULT '' CHECK (length(notes) <= 10000),
    conditions         jsonb NOT NULL,
    derived            jsonb NOT NULL,
    fluence_e_per_a2   double precision CHECK (fluence_e_per_a2 >= 0),
    tuning_id          uuid REFERENCES tunings (id),
    calibration_ids    uuid[] NOT NULL DEFAULT '{}',
    -- What the server took from the instrument, a calibration or the tuning to derive.
    applied            jsonb NOT NULL DEFAULT '[]',
    warnings           jsonb NOT NULL DEFAULT '[]',
    reason             text NOT NULL DEFAULT '' CHECK (length(reason) <= 1000),
    author             text NOT NULL,
    created_at         timestamptz NOT NULL,
    PRIMARY KEY (acquisition_id, version),
    CHECK ((version = 1) = (reason = ''))
);
CREATE INDEX acquisition_versions_specimen_idx ON acquisition_versions (specimen_id) WHERE specimen_id IS NOT NULL;

CREATE TRIGGER specimens_append_only BEFORE UPDATE OR DELETE ON specimens FOR EACH ROW EXECUTE FUNCTION refuse_change();
CREATE TRIGGER tunings_append_only BEFORE UPDATE OR DELETE ON tunings FOR EACH ROW EXECUTE FUNCTION refuse_change();
CREATE TRIGGER calibrations_append_only BEFORE UPDATE OR DELETE ON calibrations FOR EACH ROW EXECUTE FUNCTION refuse_change();
CREATE TRIGGER acquisitions_append_only BEFORE UPDATE OR DELETE ON acquisitions FOR EACH ROW EXECUTE FUNCTION refuse_change();
CREATE TRIGGER acquisition_versions_append_only BEFORE UPDATE OR DELETE ON acquisition_versions FOR EACH ROW EXECUTE FUNCTION refuse_change();
CREATE TRIGGER specimens_no_truncate BEFORE TRUNCATE ON specimens EXECUTE FUNCTION refuse_change();
CREATE TRIGGER tunings_no_truncate BEFORE TRUNCATE ON tunings EXECUTE FUNCTION refuse_change();
CREATE TRIGGER calibrations_no_truncate BEFORE TRUNCATE ON calibrations EXECUTE FUNCTION refuse_change();
CREATE TRIGGER acquisitions_no_truncate BEFORE TRUNCATE ON acquisitions EXECUTE FUNCTION refuse_change();
CREATE TRIGGER acquisition_versions_no_truncate BEFORE TRUNCATE ON acquisition_versions EXECUTE FUNCTION refuse_change();

-- +goose Down
DROP TABLE acquisition_versions;
DROP TABLE acquisitions;
DROP TABLE calibrations;
DROP TABLE tunings;
DROP TABLE specimens;
DROP FUNCTION refuse_change();
ALTER TABLE instruments DROP CONSTRAINT instruments_camera_length_range,
    DROP COLUMN condition_checks, DROP COLUMN camera_length_max_m, DROP COLUMN camera_length_min_m;
ALTER TABLE facility DROP COLUMN optics_settings;
