-- 0007 (PostgreSQL): SQLite's 0015, an EWMA designed for a number of lots
-- between false alarms (processes.ewma_arl0, limit_sets.ewma_arl0).
ALTER TABLE processes ADD COLUMN ewma_arl0 DOUBLE PRECISION NOT NULL DEFAULT 0;
ALTER TABLE limit_sets ADD COLUMN ewma_arl0 DOUBLE PRECISION NOT NULL DEFAULT 0;
