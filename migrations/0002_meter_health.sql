-- Meter health: each run's per-meter figures, kept so that a meter's history is a range scan
-- rather than a parse of every stored report; and the technicians' notes.

-- One row per (plant, tag, period): the meter in the period's current run. A re-run of the
-- period replaces the row (in the transaction that records the run), so the history always
-- follows the current runs.
CREATE TABLE meter_periods (
    plant_id               INTEGER NOT NULL REFERENCES plants (id),
    tag                    TEXT    NOT NULL,
    period_start           INTEGER NOT NULL,
    run_id                 INTEGER NOT NULL REFERENCES runs (id),
    measured               REAL,
    reconciled             REAL,
    sigma                  REAL,
    adjustment             REAL,
    adjustment_sigma       REAL,
    normalized_adjustment  REAL,
    redundant              INTEGER NOT NULL CHECK (redundant IN (0, 1)),
    -- The period's own tests named the meter (suspect or measurement test failed).
    flagged                INTEGER NOT NULL CHECK (flagged IN (0, 1)),
    readings               INTEGER NOT NULL,
    bad_readings           INTEGER NOT NULL,
    out_of_range_readings  INTEGER NOT NULL,
    -- Correlations of this meter's adjustment with the other meters' this period, as a JSON
    -- object {tag: ρ} (|ρ| ≥ 0.2): how a bias here would show elsewhere.
    correlations           TEXT    NOT NULL DEFAULT '{}',
    PRIMARY KEY (plant_id, tag, period_start)
) WITHOUT ROWID;

-- What a technician found. `recalibrated` and `replaced` start a fresh history at
-- `effective_at`; `checked` is kept for the record and changes nothing.
CREATE TABLE meter_notes (
    id            INTEGER PRIMARY KEY,
    plant_id      INTEGER NOT NULL REFERENCES plants (id),
    tag           TEXT    NOT NULL,
    kind          TEXT    NOT NULL CHECK (kind IN ('checked', 'recalibrated', 'replaced')),
    text          TEXT    NOT NULL,
    effective_at  INTEGER NOT NULL,
    created_at    INTEGER NOT NULL,
    token_id      INTEGER REFERENCES api_tokens (id)
);

CREATE INDEX meter_notes_by_tag ON meter_notes (plant_id, tag, effective_at);
