-- Technicians' notes gain two kinds and a measured error.
--
-- `out_of_service` takes a meter out of the estimate from its `effective_at` until the next
-- `back_in_service` note's `effective_at` (open-ended without one): every period starting in
-- between runs without the meter, whose readings are still stored and reported. `as_found`
-- is the error a technician measured before recalibrating, in the meter's uom (positive:
-- the meter read high); only a `recalibrated` note carries one.
--
-- SQLite cannot change a CHECK constraint in place, so the table is rebuilt with the same ids
-- (nothing references it); the index goes with the old table and is made again.
CREATE TABLE meter_notes_0004 (
    id            INTEGER PRIMARY KEY,
    plant_id      INTEGER NOT NULL REFERENCES plants (id),
    tag           TEXT    NOT NULL,
    kind          TEXT    NOT NULL CHECK (kind IN ('checked', 'recalibrated', 'replaced',
                                                   'out_of_service', 'back_in_service')),
    text          TEXT    NOT NULL,
    effective_at  INTEGER NOT NULL,
    created_at    INTEGER NOT NULL,
    token_id      INTEGER REFERENCES api_tokens (id),
    as_found      REAL    CHECK (as_found IS NULL OR kind = 'recalibrated')
);

INSERT INTO meter_notes_0004 (id, plant_id, tag, kind, text, effective_at, created_at, token_id)
    SELECT id, plant_id, tag, kind, text, effective_at, created_at, token_id FROM meter_notes;

DROP TABLE meter_notes;

ALTER TABLE meter_notes_0004 RENAME TO meter_notes;

CREATE INDEX meter_notes_by_tag ON meter_notes (plant_id, tag, effective_at);
