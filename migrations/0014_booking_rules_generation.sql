-- +goose Up
-- A number that moves on whenever anything a booking's rules are judged from changes:
-- the facility's zone and rules, an instrument's rules, bookable flag and name,
-- project membership, qualifications, funding splits and funding accounts. A process keeps the
-- rules context it last read for a booker, instrument and project together with this
-- number, and books from it only in a statement that finds the number unchanged, so a
-- change committed before the booking's statement is never booked past. The triggers
-- move it for every statement that writes those tables, whichever code path writes
-- them; a change that does not matter to the rules only costs a fresh read. Updates
-- move it only when they touch a column the rules are read from. A qualification's
-- last use is not one of them: it only ever moves forward (check-in takes the later
-- of the two), which only keeps an idle-expiring qualification alive longer, and a
-- kept context that refuses a booking is never the last word (it is judged again on a
-- fresh read); leaving it out keeps the kept contexts through a day of check-ins.
--
-- The number changes in the writing transaction, so it becomes visible exactly when
-- the change does. Writers to these tables take turns on its row until they commit;
-- such writes are a few a day against thousands of bookings.
CREATE TABLE booking_rules_generation (
    id  int PRIMARY KEY CHECK (id = 1),
    n   bigint NOT NULL
);
INSERT INTO booking_rules_generation (id, n) VALUES (1, 1);

-- +goose StatementBegin
CREATE FUNCTION booking_rules_changed() RETURNS trigger LANGUAGE plpgsql AS $$
BEGIN
    UPDATE booking_rules_generation SET n = n + 1 WHERE id = 1;
    RETURN NULL;
END;
$$;
-- +goose StatementEnd

-- The one row stays: without it no booking could be judged from a kept context.
-- +goose StatementBegin
CREATE FUNCTION booking_rules_generation_kept() RETURNS trigger LANGUAGE plpgsql AS $$
BEGIN
    RAISE EXCEPTION 'booking_rules_generation keeps its one row: % refused', TG_OP
        USING ERRCODE = 'restrict_violation';
END;
$$;
-- +goose StatementEnd
CREATE TRIGGER booking_rules_generation_no_delete BEFORE DELETE ON booking_rules_generation
    FOR EACH ROW EXECUTE FUNCTION booking_rules_generation_kept();
CREATE TRIGGER booking_rules_generation_no_truncate BEFORE TRUNCATE ON booking_rules_generation
    FOR EACH STATEMENT EXECUTE FUNCTION booking_rules_generation_kept();

CREATE TRIGGER facility_rules_changed
    AFTER INSERT OR UPDATE OF time_zone, booking_rules OR DELETE OR TRUNCATE ON facility
    FOR EACH STATEMENT EXECUTE FUNCTION booking_rules_changed();
CREATE TRIGGER instruments_rules_changed
    AFTER INSERT OR UPDATE OF rules_override, bookable, name OR DELETE OR TRUNCATE ON instruments
    FOR EACH STATEMENT EXECUTE FUNCTION booking_rules_changed();
CREATE TRIGGER project_members_rules_changed AFTER INSERT OR UPDATE OR DELETE OR TRUNCATE ON project_members
    FOR EACH STATEMENT EXECUTE FUNCTION booking_rules_changed();
CREATE TRIGGER qualifications_rules_changed
    AFTER INSERT OR UPDATE OF user_id, instrument_id, level, granted_by, granted_at, reason, expires_after_idle_days, revoked_at
       OR DELETE OR TRUNCATE ON qualifications
    FOR EACH STATEMENT EXECUTE FUNCTION booking_rules_changed();
CREATE TRIGGER project_funding_rules_changed AFTER INSERT OR UPDATE OR DELETE OR TRUNCATE ON project_funding
    FOR EACH STATEMENT EXECUTE FUNCTION booking_rules_changed();
CREATE TRIGGER funding_accounts_rules_changed AFTER INSERT OR UPDATE OR DELETE OR TRUNCATE ON funding_accounts
    FOR EACH STATEMENT EXECUTE FUNCTION booking_rules_changed();

-- +goose Down
DROP TRIGGER funding_accounts_rules_changed ON funding_accounts;
DROP TRIGGER project_funding_rules_changed ON project_funding;
DROP TRIGGER qualifications_rules_changed ON qualifications;
DROP TRIGGER project_members_rules_changed ON project_members;
DROP TRIGGER instruments_rules_changed ON instruments;
DROP TRIGGER facility_rules_changed ON facility;
DROP FUNCTION booking_rules_changed();
DROP TABLE booking_rules_generation;
DROP FUNCTION booking_rules_generation_kept();
