-- Period runs are claimed: several instances may share one database, and each dirty period is
-- run by one instance at a time. `claimed_by` names the instance that holds the claim and
-- `lease_until` (ms since the epoch) is when the claim lapses unless the instance renews it; a
-- claim of an instance that died lapses and another instance takes the period. The run is
-- recorded and the claim settled in one transaction, and only while the claim is still held.
ALTER TABLE dirty_periods ADD COLUMN claimed_by TEXT;
ALTER TABLE dirty_periods ADD COLUMN lease_until INTEGER
    CHECK ((claimed_by IS NULL) = (lease_until IS NULL));
