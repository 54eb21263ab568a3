-- +goose Up
-- Cost recovery: effective-dated rate schedules, the billing policy (facility default
-- and per-instrument overrides), funding accounts and funding splits, statements with
-- their lines, managers' adjustments, and cost entries for the recovery report.
-- Money is integer minor units (bigint) of the facility's currency (facility.currency,
-- ISO 4217) everywhere; shares are basis points (10000 = 100 %).

-- The facility's billing policy and each instrument's override, as JSON whose shape
-- scheduling.BillingPolicyOverride defines ({} = inherit everything; the facility's
-- inherits scheduling.DefaultBillingPolicy, plus monthly_cap_minor).
ALTER TABLE facility ADD COLUMN billing_policy jsonb NOT NULL DEFAULT '{}';
ALTER TABLE instruments ADD COLUMN billing_override jsonb NOT NULL DEFAULT '{}';

-- A rate change is a new schedule from an instant; schedules are never edited, so a
-- charge computed once is computed the same way again.
CREATE TABLE rate_schedules (
    id              uuid PRIMARY KEY DEFAULT gen_random_uuid(),
    instrument_id   uuid NOT NULL REFERENCES instruments (id),
    effective_from  timestamptz NOT NULL,
    currency        char(3) NOT NULL CHECK (currency ~ '^[A-Z]{3}$'),
    created_by      uuid NOT NULL REFERENCES users (id),
    created_at      timestamptz NOT NULL,
    UNIQUE (instrument_id, effective_from)
);

-- Hourly rates per rate class and booking kind, plus the staff hourly rate.
CREATE TABLE rate_schedule_rates (
    schedule_id               uuid NOT NULL REFERENCES rate_schedules (id),
    rate_class                text NOT NULL CHECK (rate_class IN ('internal', 'external_academic', 'commercial')),
    independent_hourly_minor  bigint NOT NULL CHECK (independent_hourly_minor BETWEEN 0 AND 10000000000),
    assisted_hourly_minor     bigint NOT NULL CHECK (assisted_hourly_minor BETWEEN 0 AND 10000000000),
    training_hourly_minor     bigint NOT NULL CHECK (training_hourly_minor BETWEEN 0 AND 10000000000),
    unattended_hourly_minor   bigint NOT NULL CHECK (unattended_hourly_minor BETWEEN 0 AND 10000000000),
    staff_hourly_minor        bigint NOT NULL CHECK (staff_hourly_minor BETWEEN 0 AND 10000000000),
    PRIMARY KEY (schedule_id, rate_class)
);

CREATE TABLE funding_accounts (
    id           uuid PRIMARY KEY DEFAULT gen_random_uuid(),
    project_id   uuid NOT NULL REFERENCES projects (id),
    code         text NOT NULL CHECK (length(code) BETWEEN 1 AND 100),
    valid_from   timestamptz,
    valid_until  timestamptz,
    cap_minor    bigint NOT NULL DEFAULT 0 CHECK (cap_minor >= 0),
    created_at   timestamptz NOT NULL,
    updated_at   timestamptz NOT NULL,
    UNIQUE (project_id, code),
    UNIQUE (project_id, id),
    CHECK (valid_from IS NULL OR valid_until IS NULL OR valid_from < valid_until)
);

-- A project's default split, and a booking's own split when it has one. Shares of one
-- owner sum to 10000, checked when the transaction commits.
CREATE TABLE project_funding (
    project_id    uuid NOT NULL REFERENCES projects (id),
    position      int NOT NULL CHECK (position >= 0),
    account_id    uuid NOT NULL,
    basis_points  int NOT NULL CHECK (basis_points BETWEEN 1 AND 10000),
    PRIMARY KEY (project_id, account_id),
    UNIQUE (project_id, position),
    FOREIGN KEY (project_id, account_id) REFERENCES funding_accounts (project_id, id)
);

CREATE TABLE booking_funding (
    booking_id    uuid NOT NULL REFERENCES bookings (id),
    project_id    uuid NOT NULL,
    position      int NOT NULL CHECK (position >= 0),
    account_id    uuid NOT NULL,
    basis_points  int NOT NULL CHECK (basis_points BETWEEN 1 AND 10000),
    PRIMARY KEY (booking_id, account_id),
    UNIQUE (booking_id, position),
    FOREIGN KEY (project_id, account_id) REFERENCES funding_accounts (project_id, id)
);

-- +goose StatementBegin
CREATE FUNCTION funding_shares_whole() RETURNS trigger LANGUAGE plpgsql AS $$
DECLARE
    total bigint;
BEGIN
    IF TG_TABLE_NAME = 'project_funding' THEN
        SELECT sum(basis_points) INTO total FROM project_funding
        WHERE project_id = coalesce(NEW.project_id, OLD.project_id);
    ELSE
        SELECT sum(basis_points) INTO total FROM booking_funding
        WHERE booking_id = coalesce(NEW.booking_id, OLD.booking_id);
    END IF;
    IF total IS NOT NULL AND total <> 10000 THEN
        RAISE EXCEPTION 'funding shares sum to % basis points, not 10000', total USING ERRCODE = 'check_violation';
    END IF;
    RETURN NULL;
END;
$$;
-- +goose StatementEnd

CREATE CONSTRAINT TRIGGER project_funding_whole AFTER INSERT OR UPDATE OR DELETE ON project_funding
    DEFERRABLE INITIALLY DEFERRED FOR EACH ROW EXECUTE FUNCTION funding_shares_whole();
CREATE CONSTRAINT TRIGGER booking_funding_whole AFTER INSERT OR UPDATE OR DELETE ON booking_funding
    DEFERRABLE INITIALLY DEFERRED FOR EACH ROW EXECUTE FUNCTION funding_shares_whole();

-- A project's charges for one period. A draft is recomputed in place; once issued the
-- statement and its lines never change (the triggers below refuse it), and later
-- corrections are adjustments in a later period.
CREATE TABLE statements (
    id                uuid PRIMARY KEY DEFAULT gen_random_uuid(),
    project_id        uuid NOT NULL REFERENCES projects (id),
    period_start      timestamptz NOT NULL,
    period_end        timestamptz NOT NULL CHECK (period_end > period_start),
    currency          char(3) NOT NULL CHECK (currency ~ '^[A-Z]{3}$'),
    status            text NOT NULL CHECK (status IN ('draft', 'issued')),
    computed_at       timestamptz NOT NULL,
    issued_at         timestamptz,
    issued_by         uuid REFERENCES users (id),
    total_minor       bigint NOT NULL,
    component_totals  jsonb NOT NULL,
    account_totals    jsonb NOT NULL,
    UNIQUE (project_id, period_start),
    CHECK ((status = 'issued') = (issued_at IS NOT NULL) AND (issued_at IS NULL) = (issued_by IS NULL))
);

-- One line per booking component, monthly cap or adjustment, with its split across
-- funding accounts (allocations: [{account_id, amount_minor}], summing to amount_minor).
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

-- +goose StatementBegin
CREATE FUNCTION statements_issued_final() RETURNS trigger LANGUAGE plpgsql AS $$
BEGIN
    IF OLD.status = 'issued' THEN
        RAISE EXCEPTION 'statement % was issued and cannot change: % refused', OLD.id, TG_OP
            USING ERRCODE = 'restrict_violation';
    END IF;
    RETURN CASE WHEN TG_OP = 'DELETE' THEN OLD ELSE NEW END;
END;
$$;
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

CREATE TRIGGER statements_final BEFORE UPDATE OR DELETE ON statements FOR EACH ROW EXECUTE FUNCTION statements_issued_final();
CREATE TRIGGER statement_lines_final BEFORE INSERT OR UPDATE OR DELETE ON statement_lines FOR EACH ROW EXECUTE FUNCTION statement_lines_issued_final();
CREATE TRIGGER statements_no_truncate BEFORE TRUNCATE ON statements EXECUTE FUNCTION refuse_change();
CREATE TRIGGER statement_lines_no_truncate BEFORE TRUNCATE ON statement_lines EXECUTE FUNCTION refuse_change();

-- A manager's credit (negative) or debit (positive) with its reason; it falls in the
-- period holding its instant. Never edited: a mistake is offset by another.
CREATE TABLE adjustments (
    id                     uuid PRIMARY KEY DEFAULT gen_random_uuid(),
    project_id             uuid NOT NULL REFERENCES projects (id),
    at                     timestamptz NOT NULL,
    amount_minor           bigint NOT NULL CHECK (amount_minor <> 0),
    reason                 text NOT NULL CHECK (length(reason) BETWEEN 1 AND 1000),
    made_by                uuid NOT NULL REFERENCES users (id),
    funding                jsonb NOT NULL,
    corrects_statement_id  uuid REFERENCES statements (id)
);
CREATE INDEX adjustments_project_idx ON adjustments (project_id, at);
CREATE TRIGGER adjustments_append_only BEFORE UPDATE OR DELETE ON adjustments FOR EACH ROW EXECUTE FUNCTION refuse_change();

-- A year's costs of an instrument (service contract, salary share, supplies,
-- depreciation, ...), against which issued charges are compared.
CREATE TABLE cost_entries (
    id             uuid PRIMARY KEY DEFAULT gen_random_uuid(),
    instrument_id  uuid NOT NULL REFERENCES instruments (id),
    fiscal_year    int NOT NULL CHECK (fiscal_year BETWEEN 2000 AND 2200),
    category       text NOT NULL CHECK (length(category) BETWEEN 1 AND 100),
    amount_minor   bigint NOT NULL,
    note           text NOT NULL DEFAULT '' CHECK (length(note) <= 1000),
    entered_by     uuid NOT NULL REFERENCES users (id),
    entered_at     timestamptz NOT NULL
);
CREATE INDEX cost_entries_year_idx ON cost_entries (fiscal_year, instrument_id);
CREATE TRIGGER cost_entries_append_only BEFORE UPDATE OR DELETE ON cost_entries FOR EACH ROW EXECUTE FUNCTION refuse_change();
CREATE TRIGGER rate_schedules_append_only BEFORE UPDATE OR DELETE ON rate_schedules FOR EACH ROW EXECUTE FUNCTION refuse_change();
CREATE TRIGGER rate_schedule_rates_append_only BEFORE UPDATE OR DELETE ON rate_schedule_rates FOR EACH ROW EXECUTE FUNCTION refuse_change();

-- +goose Down
DROP TABLE cost_entries;
DROP TABLE adjustments;
DROP TABLE statement_lines;
DROP TABLE statements;
DROP FUNCTION statement_lines_issued_final();
DROP FUNCTION statements_issued_final();
DROP TABLE booking_funding;
DROP TABLE project_funding;
DROP FUNCTION funding_shares_whole();
DROP TABLE funding_accounts;
DROP TABLE rate_schedule_rates;
DROP TABLE rate_schedules;
ALTER TABLE instruments DROP COLUMN billing_override;
ALTER TABLE facility DROP COLUMN billing_policy;
