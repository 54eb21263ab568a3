-- +goose Up
-- The ledger: every change appends an event in the change's own transaction, and a
-- sealer (one at a time, under an advisory lock) later gives committed events their
-- place in an RFC 6962 Merkle tree. Writers therefore never wait on each other for an
-- order, and the order is decided once, by whoever holds the lock.
--
-- Everything here is append-only. The one update allowed is the sealer's: an
-- unsealed event receives its index, once, with nothing else changing. A superuser
-- can still bypass the triggers; `beamledger ledger verify` and the signed
-- checkpoints are what catch that.

CREATE TABLE ledger_events (
    -- seq names an event before it is sealed. It is not the ledger order: identity
    -- values are taken at insert, and a transaction that inserted first may commit last.
    seq          bigint GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
    -- idx is the event's position in the tree, NULL until sealed.
    idx          bigint UNIQUE CHECK (idx >= 0),
    actor        text NOT NULL CHECK (actor <> ''),
    at           timestamptz NOT NULL,
    action       text NOT NULL CHECK (action <> ''),
    entity_type  text NOT NULL CHECK (entity_type <> ''),
    entity_id    text NOT NULL CHECK (entity_id <> ''),
    -- The RFC 8785 canonical JSON of the event, the Merkle leaf. The columns above
    -- repeat its fields for searching; verify checks they agree.
    leaf         bytea NOT NULL CHECK (length(leaf) > 0)
);
CREATE INDEX ledger_events_entity_idx ON ledger_events (entity_type, entity_id, seq);
-- The sealer's work list stays small however long the ledger grows.
CREATE INDEX ledger_events_unsealed_idx ON ledger_events (seq) WHERE idx IS NULL;

-- The tree's stored hashes, numbered as golang.org/x/mod/sumdb/tlog numbers them
-- (StoredHashIndex): each leaf hash and each complete subtree's hash, written once.
CREATE TABLE ledger_hashes (
    idx   bigint PRIMARY KEY CHECK (idx >= 0),
    hash  bytea NOT NULL CHECK (length(hash) = 32)
);

-- One row per seal that grew the tree: its size and root after the seal.
CREATE TABLE ledger_trees (
    size       bigint PRIMARY KEY CHECK (size > 0),
    root       bytea NOT NULL CHECK (length(root) = 32),
    sealed_at  timestamptz NOT NULL
);

-- Signed checkpoints: the C2SP tlog-checkpoint text signed as a note with the
-- facility's Ed25519 key. origin and root repeat the text for searching.
CREATE TABLE ledger_checkpoints (
    size       bigint PRIMARY KEY REFERENCES ledger_trees (size),
    origin     text NOT NULL CHECK (origin <> ''),
    root       bytea NOT NULL CHECK (length(root) = 32),
    note       text NOT NULL CHECK (length(note) <= 4000),
    signed_at  timestamptz NOT NULL
);

-- +goose StatementBegin
CREATE FUNCTION ledger_events_seal_only() RETURNS trigger LANGUAGE plpgsql AS $$
BEGIN
    IF TG_OP = 'UPDATE' AND OLD.idx IS NULL AND NEW.idx IS NOT NULL
       AND NEW.seq = OLD.seq AND NEW.actor = OLD.actor AND NEW.at = OLD.at AND NEW.action = OLD.action
       AND NEW.entity_type = OLD.entity_type AND NEW.entity_id = OLD.entity_id AND NEW.leaf = OLD.leaf THEN
        RETURN NEW;
    END IF;
    RAISE EXCEPTION 'ledger_events is append-only: % refused (only sealing may set idx, once)', TG_OP
        USING ERRCODE = 'restrict_violation';
END;
$$;
-- +goose StatementEnd

CREATE TRIGGER ledger_events_append_only BEFORE UPDATE OR DELETE ON ledger_events FOR EACH ROW EXECUTE FUNCTION ledger_events_seal_only();
CREATE TRIGGER ledger_hashes_append_only BEFORE UPDATE OR DELETE ON ledger_hashes FOR EACH ROW EXECUTE FUNCTION refuse_change();
CREATE TRIGGER ledger_trees_append_only BEFORE UPDATE OR DELETE ON ledger_trees FOR EACH ROW EXECUTE FUNCTION refuse_change();
CREATE TRIGGER ledger_checkpoints_append_only BEFORE UPDATE OR DELETE ON ledger_checkpoints FOR EACH ROW EXECUTE FUNCTION refuse_change();
CREATE TRIGGER ledger_events_no_truncate BEFORE TRUNCATE ON ledger_events EXECUTE FUNCTION refuse_change();
CREATE TRIGGER ledger_hashes_no_truncate BEFORE TRUNCATE ON ledger_hashes EXECUTE FUNCTION refuse_change();
CREATE TRIGGER ledger_trees_no_truncate BEFORE TRUNCATE ON ledger_trees EXECUTE FUNCTION refuse_change();
CREATE TRIGGER ledger_checkpoints_no_truncate BEFORE TRUNCATE ON ledger_checkpoints EXECUTE FUNCTION refuse_change();

-- +goose Down
DROP TABLE ledger_checkpoints;
DROP TABLE ledger_trees;
DROP TABLE ledger_hashes;
DROP TABLE ledger_events;
DROP FUNCTION ledger_events_seal_only();
