-- Each meter's running health state, kept equivalent to ../0007_meter_health_state.sql
-- (SQLite), which says what it holds and when it changes.
CREATE TABLE meter_health (
    plant_id     BIGINT  NOT NULL REFERENCES plants (id),
    tag          TEXT    COLLATE "C" NOT NULL,
    since        BIGINT  NOT NULL,
    last_period  BIGINT,
    stale        BOOLEAN NOT NULL,
    state        BYTEA   NOT NULL,
    PRIMARY KEY (plant_id, tag)
);
