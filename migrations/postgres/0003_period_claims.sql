-- Period runs are claimed: several instances may share one database, and each dirty period is
-- run by one instance at a time. `claimed_by` names the instance that holds the claim and
-- `lease_until` (ms since the epoch, by the database's clock) is when the claim lapses unless
-- the instance renews it; a claim of an instance that died lapses and another instance takes
-- the period. The run is recorded and the claim settled in one transaction, and only while the
-- claim is still held. Claimers skip rows another transaction has locked (SKIP LOCKED).
ALTER TABLE dirty_periods ADD COLUMN claimed_by TEXT;
ALTER TABLE dirty_periods ADD COLUMN lease_until BIGINT;
ALTER TABLE dirty_periods ADD CONSTRAINT dirty_periods_claim_whole
    CHECK ((claimed_by IS NULL) = (lease_until IS NULL));
