-- 0010: alerts raised by changes other than a posted lot, and rules that
-- hear of every lot of a signal.

-- alert_events.cause: '' for a lot posted by a station or on the form;
-- otherwise the change that put the lot in the outbox to be judged
-- again, in plain words (e.g. "lot A-17 corrected by kim: count misread").
ALTER TABLE alert_events ADD COLUMN cause TEXT NOT NULL DEFAULT '';

-- alert_rules.each_lot: 1 when the rule hears of every lot that extends
-- a run-rule or shift signal, not only of the lot that starts it.
ALTER TABLE alert_rules ADD COLUMN each_lot INTEGER NOT NULL DEFAULT 0;

-- alert_batches: a change that judges many lots at once, written in the
-- change's own transaction: an imported file (the lots first_lot to
-- last_lot it added) or a frozen limit set (the lots from from_time on,
-- which it judges). It raises one message per rule naming the lots that
-- signal, not one per lot. done, lease_until and lease_owner work as in
-- alert_events.
CREATE TABLE alert_batches (
	id          INTEGER PRIMARY KEY,
	process_id  INTEGER NOT NULL REFERENCES processes(id),
	kind        TEXT NOT NULL CHECK (kind IN ('import', 'limits')),
	first_lot   INTEGER NOT NULL DEFAULT 0,
	last_lot    INTEGER NOT NULL DEFAULT 0,
	from_time   INTEGER NOT NULL DEFAULT 0,
	cause       TEXT NOT NULL,
	created     INTEGER NOT NULL,
	done        INTEGER NOT NULL DEFAULT 0,
	lease_until INTEGER NOT NULL DEFAULT 0,
	lease_owner TEXT NOT NULL DEFAULT ''
);
CREATE INDEX alert_batches_pending ON alert_batches(id) WHERE done = 0;
