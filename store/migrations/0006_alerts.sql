-- 0006: alerts. Rules say which lots of a process raise an alert and
-- where it goes; the outbox holds what must still be judged and sent, so
-- that an alert survives a crash between the answer to the station and
-- the delivery.

-- alert_rules: one destination (a webhook or an e-mail address) per rule.
-- A removed rule is kept (active = 0) so that its deliveries keep their
-- history.
CREATE TABLE alert_rules (
	id                INTEGER PRIMARY KEY,
	process_id        INTEGER NOT NULL REFERENCES processes(id),
	webhook           TEXT NOT NULL,  -- URL, '' for e-mail
	secret            TEXT NOT NULL,  -- webhook signing secret, '' for e-mail
	email             TEXT NOT NULL,  -- address, '' for a webhook
	triggers          TEXT NOT NULL,  -- comma list: out_of_limits, run_rule, shift, unexplained
	unexplained_after INTEGER NOT NULL, -- nanoseconds; 0 when not escalating
	active            INTEGER NOT NULL DEFAULT 1,
	created           INTEGER NOT NULL,
	created_by        TEXT NOT NULL,
	CHECK ((webhook = '') <> (email = ''))
);
CREATE INDEX alert_rules_process ON alert_rules(process_id, active);

-- alert_events: a lot stored for a process with alert rules, written in
-- the lot's own transaction and judged later. done is the time it was
-- judged (0 while pending); lease_until/lease_owner let one of several
-- servers claim it for a while.
CREATE TABLE alert_events (
	id          INTEGER PRIMARY KEY,
	lot_id      INTEGER NOT NULL REFERENCES lots(id),
	process_id  INTEGER NOT NULL REFERENCES processes(id),
	created     INTEGER NOT NULL,
	done        INTEGER NOT NULL DEFAULT 0,
	lease_until INTEGER NOT NULL DEFAULT 0,
	lease_owner TEXT NOT NULL DEFAULT ''
);
CREATE INDEX alert_events_pending ON alert_events(id) WHERE done = 0;
CREATE INDEX alert_events_lot ON alert_events(lot_id);

-- alert_deliveries: one message to one rule's destination. msg_id is the
-- webhook-id, the same on every attempt; it is unique so that judging an
-- event twice never makes a second message.
CREATE TABLE alert_deliveries (
	id          INTEGER PRIMARY KEY,
	msg_id      TEXT NOT NULL UNIQUE,
	rule_id     INTEGER NOT NULL REFERENCES alert_rules(id),
	lot_id      INTEGER REFERENCES lots(id),
	type        TEXT NOT NULL,
	payload     TEXT NOT NULL, -- the JSON body, fixed when the message is made
	created     INTEGER NOT NULL,
	state       TEXT NOT NULL CHECK (state IN ('pending', 'sent', 'failed')),
	attempts    INTEGER NOT NULL DEFAULT 0,
	next_at     INTEGER NOT NULL,
	done_at     INTEGER NOT NULL DEFAULT 0,
	last_error  TEXT NOT NULL DEFAULT '',
	lease_until INTEGER NOT NULL DEFAULT 0,
	lease_owner TEXT NOT NULL DEFAULT ''
);
CREATE INDEX alert_deliveries_due ON alert_deliveries(next_at) WHERE state = 'pending';
CREATE INDEX alert_deliveries_rule ON alert_deliveries(rule_id, id);

-- alert_attempts: every try of a delivery: when, the answer (HTTP status
-- or SMTP code, 0 when none came), the error and how long it took.
CREATE TABLE alert_attempts (
	delivery_id INTEGER NOT NULL REFERENCES alert_deliveries(id),
	n           INTEGER NOT NULL,
	at          INTEGER NOT NULL,
	status      INTEGER NOT NULL,
	error       TEXT NOT NULL,
	took        INTEGER NOT NULL,
	PRIMARY KEY (delivery_id, n)
);
