-- +goose Up
-- A funding account may carry its own rate class: an external grant held by an
-- internal project pays the external academic rates for its share of each charge.
-- NULL means the project's class, as every account had before.
ALTER TABLE funding_accounts ADD COLUMN rate_class text
    CHECK (rate_class IN ('internal', 'external_academic', 'commercial'));

-- +goose Down
ALTER TABLE funding_accounts DROP COLUMN rate_class;
