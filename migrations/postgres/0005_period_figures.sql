-- Loop figures kept in columns, kept equivalent to ../0005_period_figures.sql (SQLite): one row
-- per figure of each period's current run, and each run's global-test result beside its
-- status, so that a year of one figure is a range scan of narrow rows.

CREATE TABLE period_figures (
    plant_id      BIGINT  NOT NULL REFERENCES plants (id),
    period_start  BIGINT  NOT NULL,
    seq           BIGINT  NOT NULL,
    run_id        BIGINT  NOT NULL REFERENCES runs (id),
    name          TEXT    COLLATE "C" NOT NULL,
    subject       TEXT    COLLATE "C" NOT NULL,
    uom           TEXT    COLLATE "C" NOT NULL,
    value         DOUBLE PRECISION,
    sigma         DOUBLE PRECISION,
    PRIMARY KEY (plant_id, period_start, seq)
);

-- Each figure's periods in time order: the figures a range has are found by seeking from one
-- figure to the next rather than by reading every row of the range.
CREATE INDEX period_figures_by_key ON period_figures (plant_id, name, subject, uom, period_start);

ALTER TABLE runs ADD COLUMN global_test_passed BOOLEAN;

-- Each period's current run's status and global test, read from the index alone, as
-- in SQLite: a series over a year must not read 8,760 rows of reports to reach them.
CREATE INDEX runs_current_outcome ON runs (plant_id, period_start, status, global_test_passed)
    WHERE current;

UPDATE runs SET global_test_passed = (report_json -> 'global_test' ->> 'passed')::boolean
WHERE json_typeof(report_json -> 'global_test' -> 'passed') = 'boolean';

INSERT INTO period_figures
    (plant_id, period_start, seq, run_id, name, subject, uom, value, sigma)
SELECT r.plant_id, r.period_start, f.n - 1, r.id,
       f.e ->> 'name', f.e ->> 'subject', f.e ->> 'uom',
       (f.e ->> 'value')::double precision, (f.e ->> 'sigma')::double precision
FROM runs AS r,
     json_array_elements(CASE WHEN json_typeof(r.report_json -> 'figures') = 'array'
                              THEN r.report_json -> 'figures' ELSE '[]'::json END)
         WITH ORDINALITY AS f (e, n)
WHERE r.current;
