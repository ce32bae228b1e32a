-- 0001: the first schema of lotwatch.
-- Times are INTEGER nanoseconds since 1970-01-01 UTC; 0 means none.
-- Nothing is ever deleted: corrections add revisions, voids set a flag.

CREATE TABLE users (
	id            INTEGER PRIMARY KEY,
	name          TEXT NOT NULL UNIQUE,
	role          TEXT NOT NULL CHECK (role IN ('viewer', 'inspector', 'engineer', 'admin')),
	password_hash TEXT NOT NULL,
	active        INTEGER NOT NULL DEFAULT 1,
	created       INTEGER NOT NULL
);

-- Only the SHA-256 of a session id or token is stored.
CREATE TABLE sessions (
	id_hash   BLOB PRIMARY KEY,
	user_id   INTEGER NOT NULL REFERENCES users(id),
	created   INTEGER NOT NULL,
	last_seen INTEGER NOT NULL
) WITHOUT ROWID;
CREATE INDEX sessions_user ON sessions(user_id);

CREATE TABLE tokens (
	id      INTEGER PRIMARY KEY,
	user_id INTEGER NOT NULL REFERENCES users(id),
	label   TEXT NOT NULL,
	hash    BLOB NOT NULL UNIQUE,
	created INTEGER NOT NULL,
	revoked INTEGER NOT NULL DEFAULT 0
);

CREATE TABLE processes (
	id          INTEGER PRIMARY KEY,
	name        TEXT NOT NULL UNIQUE,
	description TEXT NOT NULL,
	chart       TEXT NOT NULL CHECK (chart IN ('p', 'np', 'u', 'c')),
	method      TEXT NOT NULL,
	k           REAL NOT NULL,
	rules       TEXT NOT NULL,
	categories  TEXT NOT NULL, -- JSON array of names
	time_zone   TEXT NOT NULL,
	active      INTEGER NOT NULL DEFAULT 1,
	created     INTEGER NOT NULL
);

-- lots holds the current revision of each lot; earlier revisions are
-- copied to lot_revisions before a correction or void.
CREATE TABLE lots (
	id          INTEGER PRIMARY KEY,
	process_id  INTEGER NOT NULL REFERENCES processes(id),
	lot         TEXT NOT NULL,
	time        INTEGER NOT NULL,
	shift       TEXT NOT NULL,
	inspected   INTEGER NOT NULL,
	count       INTEGER NOT NULL,
	categories  TEXT NOT NULL, -- JSON object name → count, '' when none
	inspector   TEXT NOT NULL,
	note        TEXT NOT NULL,
	revision    INTEGER NOT NULL,
	voided      INTEGER NOT NULL DEFAULT 0,
	recorded    INTEGER NOT NULL,
	recorded_by TEXT NOT NULL,
	reason      TEXT NOT NULL DEFAULT '',
	UNIQUE (process_id, lot)
);
CREATE INDEX lots_time ON lots(process_id, time, id);

CREATE TABLE lot_revisions (
	lot_id      INTEGER NOT NULL REFERENCES lots(id),
	revision    INTEGER NOT NULL,
	lot         TEXT NOT NULL,
	time        INTEGER NOT NULL,
	shift       TEXT NOT NULL,
	inspected   INTEGER NOT NULL,
	count       INTEGER NOT NULL,
	categories  TEXT NOT NULL,
	inspector   TEXT NOT NULL,
	note        TEXT NOT NULL,
	voided      INTEGER NOT NULL,
	recorded    INTEGER NOT NULL,
	recorded_by TEXT NOT NULL,
	reason      TEXT NOT NULL,
	PRIMARY KEY (lot_id, revision)
);

CREATE TABLE limit_sets (
	id             INTEGER PRIMARY KEY,
	process_id     INTEGER NOT NULL REFERENCES processes(id),
	number         INTEGER NOT NULL,
	method         TEXT NOT NULL,
	k              REAL NOT NULL,
	center         REAL NOT NULL,
	sigma_z        REAL NOT NULL,
	baseline_from  INTEGER NOT NULL,
	baseline_to    INTEGER NOT NULL,
	baseline_lots  INTEGER NOT NULL,
	excluded       TEXT NOT NULL, -- JSON object lot code → reason
	effective_from INTEGER NOT NULL,
	frozen_by      TEXT NOT NULL,
	frozen_at      INTEGER NOT NULL,
	reason         TEXT NOT NULL,
	UNIQUE (process_id, number)
);

CREATE TABLE annotations (
	id         INTEGER PRIMARY KEY,
	process_id INTEGER NOT NULL REFERENCES processes(id),
	lot_id     INTEGER REFERENCES lots(id),
	rule       TEXT NOT NULL,
	cause      TEXT NOT NULL,
	action     TEXT NOT NULL,
	closed     INTEGER NOT NULL DEFAULT 0,
	by         TEXT NOT NULL,
	at         INTEGER NOT NULL,
	closed_by  TEXT NOT NULL DEFAULT '',
	closed_at  INTEGER NOT NULL DEFAULT 0
);
CREATE INDEX annotations_process ON annotations(process_id, at);

-- audit is append-only and hash-chained: hash = SHA-256(prev_hash ‖
-- canonical row). audit_head holds the last seq and hash so that a removed
-- last entry is noticed too.
CREATE TABLE audit (
	seq       INTEGER PRIMARY KEY,
	at        INTEGER NOT NULL,
	actor     TEXT NOT NULL,
	action    TEXT NOT NULL,
	entity    TEXT NOT NULL,
	entity_id INTEGER NOT NULL,
	entity_to INTEGER NOT NULL, -- last id of a range (a batch of lots), else = entity_id
	old       TEXT NOT NULL,
	new       TEXT NOT NULL,
	reason    TEXT NOT NULL,
	prev_hash TEXT NOT NULL,
	hash      TEXT NOT NULL
);
CREATE INDEX audit_entity ON audit(entity, entity_id);

CREATE TABLE audit_head (
	id    INTEGER PRIMARY KEY CHECK (id = 1),
	seq   INTEGER NOT NULL,
	hash  TEXT NOT NULL
);
INSERT INTO audit_head (id, seq, hash) VALUES (1, 0, '');
