-- 0014: a change of a process's way of judging (limit method, width, run
-- rules, shift monitors) re-judges every lot and raises alerts like a
-- frozen limit set: alert_batches.kind also takes 'settings'. SQLite
-- cannot change a CHECK, so the table is made again with its rows.
CREATE TABLE alert_batches_new (
	id          INTEGER PRIMARY KEY,
	process_id  INTEGER NOT NULL REFERENCES processes(id),
	kind        TEXT NOT NULL CHECK (kind IN ('import', 'limits', 'settings')),
	first_lot   INTEGER NOT NULL DEFAULT 0,
	last_lot    INTEGER NOT NULL DEFAULT 0,
	from_time   INTEGER NOT NULL DEFAULT 0,
	cause       TEXT NOT NULL,
	created     INTEGER NOT NULL,
	done        INTEGER NOT NULL DEFAULT 0,
	lease_until INTEGER NOT NULL DEFAULT 0,
	lease_owner TEXT NOT NULL DEFAULT ''
);
INSERT INTO alert_batches_new (id, process_id, kind, first_lot, last_lot, from_time, cause, created, done, lease_until, lease_owner)
	SELECT id, process_id, kind, first_lot, last_lot, from_time, cause, created, done, lease_until, lease_owner FROM alert_batches;
DROP TABLE alert_batches;
ALTER TABLE alert_batches_new RENAME TO alert_batches;
CREATE INDEX alert_batches_pending ON alert_batches(id) WHERE done = 0;
