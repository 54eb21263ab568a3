-- +goose Up
-- Instrument time: booking rules, qualifications, bookings with their history, series,
-- usage, waitlist, quotas and calendar-feed tokens. Bookings are never deleted.

-- The facility's default booking rules and each instrument's override, as JSON whose
-- shape scheduling.Rules / scheduling.RulesOverride define ({} = inherit everything).
ALTER TABLE facility ADD COLUMN booking_rules jsonb NOT NULL DEFAULT '{}';
ALTER TABLE instruments ADD COLUMN rules_override jsonb NOT NULL DEFAULT '{}';

CREATE TABLE qualifications (
    id                       uuid PRIMARY KEY DEFAULT gen_random_uuid(),
    user_id                  uuid NOT NULL REFERENCES users (id),
    instrument_id            uuid NOT NULL REFERENCES instruments (id),
    level                    text NOT NULL CHECK (level IN ('supervised', 'independent', 'unattended')),
    granted_by               uuid NOT NULL REFERENCES users (id),
    granted_at               timestamptz NOT NULL,
    reason                   text NOT NULL CHECK (length(reason) BETWEEN 1 AND 1000),
    expires_after_idle_days  int CHECK (expires_after_idle_days > 0),
    last_used_at             timestamptz,
    revoked_at               timestamptz,
    revoked_by               uuid REFERENCES users (id),
    revoke_reason            text,
    CHECK ((revoked_at IS NULL) = (revoked_by IS NULL) AND (revoked_at IS NULL) = (revoke_reason IS NULL))
);
-- One standing per user and instrument at a time; a new grant supersedes the old one.
CREATE UNIQUE INDEX qualifications_current_key ON qualifications (user_id, instrument_id) WHERE revoked_at IS NULL;

CREATE TABLE series (
    id             uuid PRIMARY KEY DEFAULT gen_random_uuid(),
    instrument_id  uuid NOT NULL REFERENCES instruments (id),
    project_id     uuid REFERENCES projects (id),
    user_id        uuid NOT NULL REFERENCES users (id),
    kind           text NOT NULL,
    rrule          text NOT NULL CHECK (length(rrule) BETWEEN 1 AND 500),
    start_wall     text NOT NULL,
    time_zone      text NOT NULL,
    duration_s     int NOT NULL CHECK (duration_s > 0),
    created_by     uuid NOT NULL REFERENCES users (id),
    created_at     timestamptz NOT NULL DEFAULT now()
);

CREATE TABLE bookings (
    id             uuid PRIMARY KEY DEFAULT gen_random_uuid(),
    instrument_id  uuid NOT NULL REFERENCES instruments (id),
    project_id     uuid REFERENCES projects (id),
    user_id        uuid NOT NULL REFERENCES users (id),
    kind           text NOT NULL CHECK (kind IN ('independent', 'assisted', 'training', 'unattended', 'service')),
    during         tstzrange NOT NULL CHECK (
                       NOT isempty(during) AND lower_inc(during) AND NOT upper_inc(during)
                       AND NOT lower_inf(during) AND NOT upper_inf(during)),
    staff_id       uuid REFERENCES users (id),
    series_id      uuid REFERENCES series (id),
    status         text NOT NULL DEFAULT 'active' CHECK (status IN ('active', 'cancelled')),
    note           text NOT NULL DEFAULT '' CHECK (length(note) <= 2000),
    displaced_by   uuid REFERENCES bookings (id) DEFERRABLE INITIALLY DEFERRED,
    cancelled_at   timestamptz,
    cancelled_by   text,
    cancel_reason  text,
    created_at     timestamptz NOT NULL,
    created_by     text NOT NULL,
    updated_at     timestamptz NOT NULL,
    CHECK ((kind = 'service') = (project_id IS NULL)),
    CHECK (kind NOT IN ('assisted', 'training') OR staff_id IS NOT NULL),
    CHECK ((status = 'cancelled') = (cancelled_at IS NOT NULL)),
    -- No two active bookings of one instrument overlap; back-to-back [a,b) [b,c) do not.
    CONSTRAINT bookings_no_overlap EXCLUDE USING gist (instrument_id WITH =, during WITH &&) WHERE (status = 'active'),
    -- A staff member assists or trains in one place at a time.
    CONSTRAINT bookings_staff_no_overlap EXCLUDE USING gist (staff_id WITH =, during WITH &&)
        WHERE (status = 'active' AND staff_id IS NOT NULL)
);
CREATE INDEX bookings_user_idx ON bookings (user_id, lower(during));
CREATE INDEX bookings_project_idx ON bookings (project_id, lower(during));
CREATE INDEX bookings_series_idx ON bookings (series_id) WHERE series_id IS NOT NULL;

-- Every change to a booking, attributed: who (a user id or "agent:<token id>"), when,
-- why, and the range before and after. Kept forever.
CREATE TABLE booking_events (
    id          bigint GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
    booking_id  uuid NOT NULL REFERENCES bookings (id),
    at          timestamptz NOT NULL,
    actor       text NOT NULL,
    action      text NOT NULL CHECK (action IN ('created', 'moved', 'cancelled', 'displaced', 'checked_in', 'checked_out', 'no_show')),
    reason      text NOT NULL DEFAULT '',
    before      tstzrange,
    after       tstzrange
);
CREATE INDEX booking_events_booking_idx ON booking_events (booking_id, id);

-- Actual work on a booking: check-in and check-out. Usage outside the booked range is
-- kept as it happened and flagged as overrun by queries, never clipped.
CREATE TABLE usages (
    id           uuid PRIMARY KEY DEFAULT gen_random_uuid(),
    booking_id   uuid NOT NULL REFERENCES bookings (id),
    started_at   timestamptz NOT NULL,
    ended_at     timestamptz CHECK (ended_at IS NULL OR ended_at > started_at),
    started_by   text NOT NULL,
    ended_by     text,
    source       text NOT NULL CHECK (source IN ('user', 'staff', 'agent'))
);
-- At most one open usage per booking.
CREATE UNIQUE INDEX usages_open_key ON usages (booking_id) WHERE ended_at IS NULL;

CREATE TABLE no_shows (
    booking_id   uuid PRIMARY KEY REFERENCES bookings (id),
    detected_at  timestamptz NOT NULL
);

CREATE TABLE waitlist_entries (
    id                uuid PRIMARY KEY DEFAULT gen_random_uuid(),
    instrument_id     uuid NOT NULL REFERENCES instruments (id),
    project_id        uuid NOT NULL REFERENCES projects (id),
    user_id           uuid NOT NULL REFERENCES users (id),
    kind              text NOT NULL CHECK (kind IN ('independent', 'assisted', 'training', 'unattended')),
    staff_id          uuid REFERENCES users (id),
    during            tstzrange NOT NULL CHECK (NOT isempty(during) AND lower_inc(during) AND NOT upper_inc(during)),
    status            text NOT NULL DEFAULT 'waiting' CHECK (status IN ('waiting', 'offered', 'booked', 'lapsed', 'withdrawn')),
    offered_at        timestamptz,
    offer_expires_at  timestamptz,
    booking_id        uuid REFERENCES bookings (id),
    created_at        timestamptz NOT NULL,
    updated_at        timestamptz NOT NULL
);
CREATE INDEX waitlist_instrument_idx ON waitlist_entries (instrument_id, created_at) WHERE status IN ('waiting', 'offered');

CREATE TABLE quotas (
    project_id         uuid NOT NULL REFERENCES projects (id),
    instrument_id      uuid NOT NULL REFERENCES instruments (id),
    period             text NOT NULL CHECK (period IN ('week', 'month', 'quarter')),
    allocated_minutes  int NOT NULL CHECK (allocated_minutes >= 0),
    updated_at         timestamptz NOT NULL DEFAULT now(),
    PRIMARY KEY (project_id, instrument_id, period)
);

-- Calendar clients cannot send an Authorization header: feeds take a revocable
-- per-user token in the URL, stored hashed.
CREATE TABLE feed_tokens (
    id          uuid PRIMARY KEY DEFAULT gen_random_uuid(),
    user_id     uuid NOT NULL REFERENCES users (id),
    token_hash  bytea NOT NULL UNIQUE CHECK (length(token_hash) = 32),
    created_at  timestamptz NOT NULL DEFAULT now(),
    revoked_at  timestamptz
);

-- +goose Down
DROP TABLE feed_tokens;
DROP TABLE quotas;
DROP TABLE waitlist_entries;
DROP TABLE no_shows;
DROP TABLE usages;
DROP TABLE booking_events;
DROP TABLE bookings;
DROP TABLE series;
DROP TABLE qualifications;
ALTER TABLE instruments DROP COLUMN rules_override;
ALTER TABLE facility DROP COLUMN booking_rules;
