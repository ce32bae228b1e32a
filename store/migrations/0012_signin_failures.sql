-- 0012: failed sign-ins, counted in the database so that every server on
-- it holds a client to the same limits. Not part of the plant's record:
-- no audit entries, not copied, swept as it ages. Keys (a user name and
-- client address, or an address) are kept as their SHA-256, as session
-- ids are: fixed in size, and no typed name is written down.

-- signin_failures are the failures of a key still within its window;
-- expires is when the failure stops counting.
CREATE TABLE signin_failures (
	key_hash BLOB NOT NULL,
	at       INTEGER NOT NULL,
	expires  INTEGER NOT NULL
);
CREATE INDEX signin_failures_key ON signin_failures(key_hash);
CREATE INDEX signin_failures_expires ON signin_failures(expires);

-- signin_blocks hold a key's block: refused until blocked_until, blocked
-- strikes times so far; the record is forgotten at forget.
CREATE TABLE signin_blocks (
	key_hash      BLOB PRIMARY KEY,
	blocked_until INTEGER NOT NULL,
	strikes       INTEGER NOT NULL,
	forget        INTEGER NOT NULL
) WITHOUT ROWID;
CREATE INDEX signin_blocks_forget ON signin_blocks(forget);

-- signin_sweep is when the two tables were last swept. Each writer of
-- them updates this one row first, so that the servers sharing a database
-- count failures one after another.
CREATE TABLE signin_sweep (
	id    INTEGER PRIMARY KEY CHECK (id = 1),
	swept INTEGER NOT NULL
);
INSERT INTO signin_sweep (id, swept) VALUES (1, 0);
