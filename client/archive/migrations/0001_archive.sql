-- taprig archive, schema 1: rigs, their tests and point sets, fitted modal models.
-- Applied once, in a transaction, by taprig.client.archive.migrate; recorded in
-- archive_migrations. Documented in client/archive/SCHEMA.md.

-- One row per rig ever followed. cursor: the rig's change-feed position up to which every
-- change is stored; it moves in the transaction that stores the change.
CREATE TABLE rigs (
    rig_id       text PRIMARY KEY,
    name         text NOT NULL,
    url          text NOT NULL,
    cursor       bigint NOT NULL DEFAULT 0 CHECK (cursor >= 0),
    first_seen   timestamptz NOT NULL DEFAULT now(),
    last_pull    timestamptz,
    last_error   text,
    follower     text
);

-- A rig's test. body: the test object of the wire schema (schema/wire.py test_to_obj), kept
-- as the JSON text it was written as; the other columns are copies for queries.
-- part: the part type the test belongs to (meta "part", else the name without its trailing
-- serial or date; see SCHEMA.md), for trends of repeated tests.
CREATE TABLE tests (
    rig_id       text NOT NULL REFERENCES rigs,
    name         text NOT NULL,
    part         text NOT NULL,
    seq          bigint NOT NULL,
    created_utc  timestamptz NOT NULL,
    roving_mode  text NOT NULL,
    reference    text NOT NULL,
    averages     integer NOT NULL,
    grid_points  integer NOT NULL,
    body         json NOT NULL,
    PRIMARY KEY (rig_id, name)
);
CREATE INDEX tests_by_name ON tests (name);
CREATE INDEX tests_by_created ON tests (created_utc);
CREATE INDEX tests_by_part ON tests (part, created_utc);

-- A completed point set: the msgpack body exactly as the rig served it (wire schema
-- schema_version) with its Content-Digest, metadata in columns. A rig's point set id and its
-- (test, point, version) are each stored once.
CREATE TABLE point_sets (
    rig_id          text NOT NULL,
    id              bigint NOT NULL,
    test            text NOT NULL,
    point           text NOT NULL,
    version         integer NOT NULL,
    seq             bigint NOT NULL,
    completed_utc   timestamptz NOT NULL,
    n_averages      integer NOT NULL,
    schema_version  integer NOT NULL,
    digest          text NOT NULL,
    size            integer NOT NULL,
    body            bytea NOT NULL,
    archived_at     timestamptz NOT NULL DEFAULT now(),
    PRIMARY KEY (rig_id, id),
    UNIQUE (rig_id, test, point, version),
    FOREIGN KEY (rig_id, test) REFERENCES tests
);
-- Bodies are mostly raw float arrays, which TOAST compression barely shrinks while spending
-- CPU on every write: they are stored out of line as they are.
ALTER TABLE point_sets ALTER COLUMN body SET STORAGE EXTERNAL;
CREATE INDEX point_sets_by_completed ON point_sets (completed_utc);

-- A modal model fitted to a test: the model's npz bytes, their SHA-256 and a JSON summary
-- (modes: frequency, damping, ...). Several fits of one test are kept, by creation time.
CREATE TABLE modal_models (
    rig_id       text NOT NULL,
    test         text NOT NULL,
    created      timestamptz NOT NULL DEFAULT now(),
    digest       text NOT NULL,
    summary      jsonb NOT NULL,
    body         bytea NOT NULL,
    PRIMARY KEY (rig_id, test, created),
    FOREIGN KEY (rig_id, test) REFERENCES tests
);
