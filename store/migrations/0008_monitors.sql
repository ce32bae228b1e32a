-- 0008: the shift monitors a process may watch beside its chart.
--
-- cusum_shift is the rate the CUSUM is to catch (0: no CUSUM) and
-- cusum_arl0 the in-control average run length it is designed for (0:
-- the default, 370 lots); ewma_lambda is the EWMA's weight (0: no EWMA)
-- and ewma_width the width of its limits (0: the default, 3).
ALTER TABLE processes ADD COLUMN cusum_shift REAL NOT NULL DEFAULT 0;
ALTER TABLE processes ADD COLUMN cusum_arl0 REAL NOT NULL DEFAULT 0;
ALTER TABLE processes ADD COLUMN ewma_lambda REAL NOT NULL DEFAULT 0;
ALTER TABLE processes ADD COLUMN ewma_width REAL NOT NULL DEFAULT 0;

-- A frozen limit set freezes the monitors in force with the centre: the
-- CUSUM's shift, design ARL0 and decision interval h, and the EWMA's
-- weight and width (0: none).
ALTER TABLE limit_sets ADD COLUMN cusum_shift REAL NOT NULL DEFAULT 0;
ALTER TABLE limit_sets ADD COLUMN cusum_arl0 REAL NOT NULL DEFAULT 0;
ALTER TABLE limit_sets ADD COLUMN cusum_h REAL NOT NULL DEFAULT 0;
ALTER TABLE limit_sets ADD COLUMN ewma_lambda REAL NOT NULL DEFAULT 0;
ALTER TABLE limit_sets ADD COLUMN ewma_width REAL NOT NULL DEFAULT 0;
