-- Technicians' notes gain two kinds and a measured error, kept equivalent to
-- ../0004_out_of_service_notes.sql (SQLite).
--
-- `out_of_service` takes a meter out of the estimate from its `effective_at` until the next
-- `back_in_service` note's `effective_at` (open-ended without one): every period starting in
-- between runs without the meter, whose readings are still stored and reported. `as_found`
-- is the error a technician measured before recalibrating, in the meter's uom (positive:
-- the meter read high); only a `recalibrated` note carries one.
ALTER TABLE meter_notes DROP CONSTRAINT meter_notes_kind_check;

ALTER TABLE meter_notes ADD CONSTRAINT meter_notes_kind_check
    CHECK (kind IN ('checked', 'recalibrated', 'replaced', 'out_of_service', 'back_in_service'));

ALTER TABLE meter_notes ADD COLUMN as_found DOUBLE PRECISION
    CHECK (as_found IS NULL OR kind = 'recalibrated');
