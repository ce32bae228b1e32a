-- 0005: signin_sweep goes (the SQLite migration 0013; see there).
DROP TABLE signin_sweep;
