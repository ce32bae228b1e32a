-- 0004: failed sign-ins counted in the database (the SQLite migration
-- 0012; see there).
CREATE TABLE signin_failures (
	key_hash BYTEA NOT NULL,
	at       BIGINT NOT NULL,
	expires  BIGINT NOT NULL
);
CREATE INDEX signin_failures_key ON signin_failures(key_hash);
CREATE INDEX signin_failures_expires ON signin_failures(expires);

CREATE TABLE signin_blocks (
	key_hash      BYTEA PRIMARY KEY,
	blocked_until BIGINT NOT NULL,
	strikes       INTEGER NOT NULL,
	forget        BIGINT NOT NULL
);
CREATE INDEX signin_blocks_forget ON signin_blocks(forget);

CREATE TABLE signin_sweep (
	id    INTEGER PRIMARY KEY CHECK (id = 1),
	swept BIGINT NOT NULL
);
INSERT INTO signin_sweep (id, swept) VALUES (1, 0);
