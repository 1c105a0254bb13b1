-- The service's first schema. Migrations are append-only: never edit a file once it has
-- shipped; add the next number instead (sqlx checks each applied file's checksum).
--
-- Every instant is INTEGER milliseconds since the Unix epoch, UTC. One instant then has one
-- key whatever offset the historian spelled it with (FORMATS.md: two spellings of one
-- instant are one reading), range queries and period arithmetic are integer comparisons, and
-- the same column type works unchanged in PostgreSQL (BIGINT). RFC 3339 text would sort
-- correctly only when every writer used the same offset and precision.

CREATE TABLE plants (
    id          INTEGER PRIMARY KEY,
    name        TEXT    NOT NULL UNIQUE,
    created_at  INTEGER NOT NULL
);

-- A model revision never changes once stored; a new model is a new revision, so every run can
-- name the exact model it used.
CREATE TABLE model_revisions (
    plant_id        INTEGER NOT NULL REFERENCES plants (id),
    revision        INTEGER NOT NULL CHECK (revision >= 1),
    effective_from  INTEGER NOT NULL,
    -- The ModelSpec as JSON (what the service works from) and the text as the user sent it
    -- (TOML or JSON, with its comments), for showing back.
    model_json      TEXT    NOT NULL,
    source          TEXT    NOT NULL,
    created_at      INTEGER NOT NULL,
    PRIMARY KEY (plant_id, revision)
);

CREATE INDEX model_revisions_effective ON model_revisions (plant_id, effective_from);

CREATE TRIGGER model_revisions_immutable_update BEFORE UPDATE ON model_revisions
BEGIN
    SELECT RAISE(ABORT, 'model revisions are immutable');
END;

CREATE TRIGGER model_revisions_immutable_delete BEFORE DELETE ON model_revisions
BEGIN
    SELECT RAISE(ABORT, 'model revisions are immutable');
END;

-- The meters of each revision, so queries by tag need not parse model_json.
CREATE TABLE meters (
    plant_id   INTEGER NOT NULL,
    revision   INTEGER NOT NULL,
    tag        TEXT    NOT NULL,
    stream     TEXT    NOT NULL,
    quantity   TEXT    NOT NULL,
    component  TEXT,
    uom        TEXT    NOT NULL,
    range_lo   REAL,
    range_hi   REAL,
    PRIMARY KEY (plant_id, revision, tag),
    FOREIGN KEY (plant_id, revision) REFERENCES model_revisions (plant_id, revision)
);

-- One row per (plant, tag, instant): a resend of the same instant replaces the row. The tag
-- is not a foreign key to meters: meters belong to revisions, and a reading outlives them.
CREATE TABLE readings (
    plant_id      INTEGER NOT NULL REFERENCES plants (id),
    tag           TEXT    NOT NULL,
    time          INTEGER NOT NULL,
    -- SQLite stores a NaN as NULL, so NOT NULL also refuses a NaN that slipped past the
    -- boundary's checks.
    value         REAL    NOT NULL,
    quality       TEXT    NOT NULL CHECK (quality IN ('good', 'uncertain', 'bad')),
    received_at   INTEGER NOT NULL,
    -- Outside the meter's instrument range: stored and flagged, never dropped.
    out_of_range  INTEGER NOT NULL DEFAULT 0 CHECK (out_of_range IN (0, 1)),
    -- How often a changed value or quality replaced this row: 0 tells the ingest statement
    -- that its upsert inserted rather than replaced.
    replacements  INTEGER NOT NULL DEFAULT 0,
    PRIMARY KEY (plant_id, tag, time)
) WITHOUT ROWID;

CREATE INDEX readings_by_time ON readings (plant_id, time);

-- Periods whose inputs changed since their last run; the scheduler runs and clears them.
CREATE TABLE dirty_periods (
    plant_id      INTEGER NOT NULL REFERENCES plants (id),
    period_start  INTEGER NOT NULL,
    marked_at     INTEGER NOT NULL,
    PRIMARY KEY (plant_id, period_start)
);

-- Only the SHA-256 of a token is kept: a copy of the database grants nothing. The plant scope
-- is the plant's name, not its id, so a token may be made for a plant not yet created.
CREATE TABLE api_tokens (
    id          INTEGER PRIMARY KEY,
    hash        TEXT    NOT NULL UNIQUE,
    role        TEXT    NOT NULL CHECK (role IN ('ingest', 'read', 'maintain', 'admin')),
    plant       TEXT,
    created_at  INTEGER NOT NULL,
    revoked_at  INTEGER
);

-- Every run of a period is kept (the history); `current` marks the one that answers for the
-- period now.
CREATE TABLE runs (
    id              INTEGER PRIMARY KEY,
    plant_id        INTEGER NOT NULL REFERENCES plants (id),
    period_start    INTEGER NOT NULL,
    revision        INTEGER NOT NULL,
    engine_version  TEXT    NOT NULL,
    status          TEXT    NOT NULL,
    report_json     TEXT    NOT NULL,
    inputs_json     TEXT    NOT NULL,
    created_at      INTEGER NOT NULL,
    current         INTEGER NOT NULL CHECK (current IN (0, 1)),
    FOREIGN KEY (plant_id, revision) REFERENCES model_revisions (plant_id, revision)
);

-- At most one current run per period, enforced by the database, and the index the lookup of
-- the current run uses.
CREATE UNIQUE INDEX runs_current ON runs (plant_id, period_start) WHERE current = 1;

CREATE INDEX runs_history ON runs (plant_id, period_start, id);
