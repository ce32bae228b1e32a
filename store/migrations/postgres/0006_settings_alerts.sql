-- 0006 (PostgreSQL): SQLite's 0014, alert_batches.kind also takes
-- 'settings' (a change of a process's way of judging).
ALTER TABLE alert_batches DROP CONSTRAINT alert_batches_kind_check;
ALTER TABLE alert_batches ADD CONSTRAINT alert_batches_kind_check CHECK (kind IN ('import', 'limits', 'settings'));
