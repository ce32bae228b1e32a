-- 0013: signin_sweep goes. Its one row was updated first by every writer
-- of the sign-in tables so that servers sharing a database would count
-- one after another; every writer transaction already takes the audit
-- chain head first, which does that for all writes.
DROP TABLE signin_sweep;
