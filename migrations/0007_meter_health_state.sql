-- Each meter's running health state, so that the meter list reads one row a meter instead of
-- its whole record: the CUSUM sums and where each side's excursion began, the pooled-bias sums
-- of each side's evidence and of the whole record, the counts and the frozen-run state at the
-- end of the record (server/src/health/running.rs encodes them in `state`). It is a derived
-- cache: deleting a row only makes the next read rebuild it from meter_periods.
--
-- The transaction that records a run folds the run's row into the state of each of its meters
-- when the period is later than the state's last (O(1) per meter), and marks the state stale
-- from the period when it is at or before the last (a re-run or late data); a reader brings a
-- stale state up to date from the state kept at the end of one of the last two days (`state`
-- holds those checkpoints too) or, for an older period, from the record bounded by the health
-- window. `since` is the instant the record the state covers starts at (the last recalibration
-- or replacement, or the window's start); `last_period` the last period folded in; `stale`
-- whether a run landed at or before it since the state was last brought up to date.
CREATE TABLE meter_health (
    plant_id     INTEGER NOT NULL REFERENCES plants (id),
    tag          TEXT    NOT NULL,
    since        INTEGER NOT NULL,
    last_period  INTEGER,
    stale        INTEGER NOT NULL CHECK (stale IN (0, 1)),
    state        BLOB    NOT NULL,
    PRIMARY KEY (plant_id, tag)
) WITHOUT ROWID;
