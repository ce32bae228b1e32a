-- 0003: e-mail rules that send the day's messages as one digest (the
-- SQLite migration 0011; see there).
ALTER TABLE alert_rules ADD COLUMN digest TEXT NOT NULL DEFAULT '';
