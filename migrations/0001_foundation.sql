-- +goose Up
-- The foundation: the facility, people, projects, instruments and credentials.
-- Invariants live here (keys, checks); Go-side validation only words the errors.

-- btree_gist lets later migrations exclude overlapping booking ranges per instrument.
CREATE EXTENSION IF NOT EXISTS btree_gist;

CREATE TABLE facility (
    id         smallint PRIMARY KEY DEFAULT 1 CHECK (id = 1),
    name       text NOT NULL CHECK (length(name) BETWEEN 1 AND 200),
    time_zone  text NOT NULL,
    currency   char(3) NOT NULL CHECK (currency ~ '^[A-Z]{3}$'),
    created_at timestamptz NOT NULL DEFAULT now()
);

CREATE TABLE users (
    id            uuid PRIMARY KEY DEFAULT gen_random_uuid(),
    email         text NOT NULL CHECK (email = lower(email) AND length(email) BETWEEN 3 AND 254),
    display_name  text NOT NULL CHECK (length(display_name) BETWEEN 1 AND 200),
    orcid         text CHECK (orcid ~ '^[0-9]{4}-[0-9]{4}-[0-9]{4}-[0-9]{3}[0-9X]$'),
    role          text NOT NULL CHECK (role IN ('manager', 'staff', 'researcher', 'auditor')),
    password_hash text NOT NULL DEFAULT '',
    disabled      boolean NOT NULL DEFAULT false,
    -- Moves on at password change and disabling; access tokens carry the version.
    token_version bigint NOT NULL DEFAULT 1,
    created_at    timestamptz NOT NULL DEFAULT now(),
    updated_at    timestamptz NOT NULL DEFAULT now()
);
CREATE UNIQUE INDEX users_email_key ON users (email);

CREATE TABLE projects (
    id                         uuid PRIMARY KEY DEFAULT gen_random_uuid(),
    code                       text NOT NULL UNIQUE CHECK (code ~ '^[A-Z0-9][A-Z0-9-]{1,31}$'),
    title                      text NOT NULL CHECK (length(title) BETWEEN 1 AND 300),
    principal_investigator_id  uuid NOT NULL REFERENCES users (id),
    rate_class                 text NOT NULL CHECK (rate_class IN ('internal', 'external_academic', 'commercial')),
    created_at                 timestamptz NOT NULL DEFAULT now(),
    updated_at                 timestamptz NOT NULL DEFAULT now()
);

CREATE TABLE project_members (
    project_id uuid NOT NULL REFERENCES projects (id) ON DELETE CASCADE,
    user_id    uuid NOT NULL REFERENCES users (id),
    added_at   timestamptz NOT NULL DEFAULT now(),
    PRIMARY KEY (project_id, user_id)
);
CREATE INDEX project_members_user_idx ON project_members (user_id);

CREATE TABLE instruments (
    id                       uuid PRIMARY KEY DEFAULT gen_random_uuid(),
    code                     text NOT NULL UNIQUE CHECK (code ~ '^[A-Z0-9][A-Z0-9-]{1,31}$'),
    name                     text NOT NULL CHECK (length(name) BETWEEN 1 AND 200),
    kind                     text NOT NULL CHECK (kind IN ('stem', 'tem', 'sem', 'fib_sem', 'other')),
    location                 text NOT NULL DEFAULT '',
    bookable                 boolean NOT NULL DEFAULT true,
    accelerating_voltages_v  double precision[] NOT NULL DEFAULT '{}',
    corrector                text NOT NULL DEFAULT 'none' CHECK (corrector IN ('none', 'probe', 'image', 'probe_and_image')),
    created_at               timestamptz NOT NULL DEFAULT now(),
    updated_at               timestamptz NOT NULL DEFAULT now()
);

CREATE TABLE detectors (
    instrument_id   uuid NOT NULL REFERENCES instruments (id) ON DELETE CASCADE,
    name            text NOT NULL CHECK (length(name) BETWEEN 1 AND 100),
    kind            text NOT NULL CHECK (kind IN ('annular', 'pixelated', 'camera', 'spectrometer', 'secondary', 'backscatter')),
    inner_radius_m  double precision CHECK (inner_radius_m >= 0),
    outer_radius_m  double precision CHECK (outer_radius_m > 0),
    position        int NOT NULL,
    PRIMARY KEY (instrument_id, name),
    CHECK (inner_radius_m IS NULL OR outer_radius_m IS NULL OR inner_radius_m < outer_radius_m)
);

CREATE TABLE agent_tokens (
    id             uuid PRIMARY KEY DEFAULT gen_random_uuid(),
    instrument_id  uuid NOT NULL REFERENCES instruments (id),
    name           text NOT NULL CHECK (length(name) BETWEEN 1 AND 100),
    token_hash     bytea NOT NULL UNIQUE CHECK (length(token_hash) = 32),
    scopes         text[] NOT NULL CHECK (cardinality(scopes) > 0),
    created_by     uuid NOT NULL REFERENCES users (id),
    created_at     timestamptz NOT NULL DEFAULT now(),
    expires_at     timestamptz,
    revoked_at     timestamptz,
    last_used_at   timestamptz
);
CREATE INDEX agent_tokens_instrument_idx ON agent_tokens (instrument_id);

CREATE TABLE refresh_tokens (
    id          uuid PRIMARY KEY DEFAULT gen_random_uuid(),
    user_id     uuid NOT NULL REFERENCES users (id) ON DELETE CASCADE,
    family_id   uuid NOT NULL,
    token_hash  bytea NOT NULL UNIQUE CHECK (length(token_hash) = 32),
    created_at  timestamptz NOT NULL DEFAULT now(),
    expires_at  timestamptz NOT NULL,
    used_at     timestamptz,
    revoked_at  timestamptz
);
CREATE INDEX refresh_tokens_family_idx ON refresh_tokens (family_id);
CREATE INDEX refresh_tokens_user_idx ON refresh_tokens (user_id);

-- Failed-login counters shared by every server process. key is "account:<email>" or
-- "address:<ip>".
CREATE TABLE login_throttle (
    key           text PRIMARY KEY,
    failures      int NOT NULL CHECK (failures >= 0),
    window_start  timestamptz NOT NULL
);

-- +goose Down
DROP TABLE login_throttle;
DROP TABLE refresh_tokens;
DROP TABLE agent_tokens;
DROP TABLE detectors;
DROP TABLE instruments;
DROP TABLE project_members;
DROP TABLE projects;
DROP TABLE users;
DROP TABLE facility;
