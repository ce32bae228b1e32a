-- 0007: a process keeps the plant's own lot-file headers mapped to
-- lotwatch's columns, and the order of day and month in its local dates.
ALTER TABLE processes ADD COLUMN column_map TEXT NOT NULL DEFAULT '{}'; -- JSON object header → column
ALTER TABLE processes ADD COLUMN date_order TEXT NOT NULL DEFAULT ''; -- '', 'day-first' or 'month-first'
