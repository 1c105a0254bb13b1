-- Loop figures kept in columns: one row per figure of each period's current run, and each
-- run's global-test result beside its status, so that a year of one figure is a range scan of
-- narrow rows rather than a parse of every period's stored report (the web workspace's trend
-- charts read a year at a time).

-- The figures of the period's current run, written in the transaction that records the run;
-- a re-run of the period replaces them all. `seq` is the figure's place in its report's list
-- (the model's order).
CREATE TABLE period_figures (
    plant_id      INTEGER NOT NULL REFERENCES plants (id),
    period_start  INTEGER NOT NULL,
    seq           INTEGER NOT NULL,
    run_id        INTEGER NOT NULL REFERENCES runs (id),
    name          TEXT    NOT NULL,
    subject       TEXT    NOT NULL,
    uom           TEXT    NOT NULL,
    value         REAL,
    sigma         REAL,
    PRIMARY KEY (plant_id, period_start, seq)
) WITHOUT ROWID;

-- Each figure's periods in time order: the figures a range has are found by seeking from one
-- figure to the next rather than by reading every row of the range.
CREATE INDEX period_figures_by_key ON period_figures (plant_id, name, subject, uom, period_start);

-- Whether the run passed the global test (1 or 0); NULL where it had none (no data, no
-- redundancy, not converged).
ALTER TABLE runs ADD COLUMN global_test_passed INTEGER;

-- Each period's current run's status and global test, read from the index alone: the
-- column comes after the report in each row, and a series over a year must not read 8,760
-- reports to reach it.
CREATE INDEX runs_current_outcome ON runs (plant_id, period_start, status, global_test_passed)
    WHERE current = 1;

-- What is already stored, from the stored reports.
UPDATE runs SET global_test_passed = json_extract(report_json, '$.global_test.passed')
WHERE json_type(report_json, '$.global_test.passed') IN ('true', 'false');

INSERT INTO period_figures
    (plant_id, period_start, seq, run_id, name, subject, uom, value, sigma)
SELECT r.plant_id, r.period_start, CAST(f.key AS INTEGER), r.id,
       json_extract(f.value, '$.name'), json_extract(f.value, '$.subject'),
       json_extract(f.value, '$.uom'), json_extract(f.value, '$.value'),
       json_extract(f.value, '$.sigma')
FROM runs AS r, json_each(r.report_json, '$.figures') AS f
WHERE r.current = 1 AND json_type(r.report_json, '$.figures') = 'array';
