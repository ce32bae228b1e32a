-- 0015: an EWMA designed for a number of lots between false alarms, as
-- the CUSUM is. processes.ewma_arl0: the in-control average run length
-- the EWMA's width is designed for over the process's lot sizes when no
-- width is given (0: the width given, or 3). limit_sets.ewma_arl0: the
-- target a frozen set's width (ewma_width, designed at the freeze) was
-- designed for.
ALTER TABLE processes ADD COLUMN ewma_arl0 REAL NOT NULL DEFAULT 0;
ALTER TABLE limit_sets ADD COLUMN ewma_arl0 REAL NOT NULL DEFAULT 0;
