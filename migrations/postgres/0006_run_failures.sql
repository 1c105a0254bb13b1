-- Periods whose run was abandoned at its time limit (`loopbal serve --run-timeout`): one row a
-- period, kept until a run of the period is recorded (deleted in the transaction that records
-- it). `failures` counts the abandoned runs since the last recorded one, `reason` says why the
-- last was abandoned, `failed_at` is when (ms since the epoch), and `retry_after` is when the
-- period may be claimed again: the backoff doubles with each failure (server/src/run_limit.rs).
-- Claims skip a period until its `retry_after` has passed. A reading that marks the period
-- again does not clear the row: the engine's work on the period is what failed, and a changed
-- reading does not make it shorter.
--
-- Both instants are by the clock of the instance that recorded the failure, as a run's
-- `created_at` is: a backoff is only a delay, so instances whose clocks disagree by a little
-- retry a little apart, which is harmless (leases, which must agree, use the database's clock
-- on PostgreSQL).
CREATE TABLE run_failures (
    plant_id      BIGINT  NOT NULL REFERENCES plants (id),
    period_start  BIGINT  NOT NULL,
    failures      BIGINT  NOT NULL CHECK (failures > 0),
    reason        TEXT    NOT NULL,
    failed_at     BIGINT  NOT NULL,
    retry_after   BIGINT  NOT NULL,
    PRIMARY KEY (plant_id, period_start)
);
