-- 0003: "no assignable cause found" as a finding, and an area label on a
-- process.
--
-- An annotation with no_cause = 1 records that a lot or signal was
-- investigated and no assignable cause was found (common-cause noise);
-- its reason says why. Such an annotation is closed when recorded: it
-- explains the lot as a found cause does.
ALTER TABLE annotations ADD COLUMN no_cause INTEGER NOT NULL DEFAULT 0;
ALTER TABLE annotations ADD COLUMN reason TEXT NOT NULL DEFAULT '';
CREATE INDEX annotations_lot ON annotations(lot_id);

-- area is the plant's area or line a process belongs to ("Press shop",
-- "Line 4"), for filtering the board and the worklist; '' when none.
ALTER TABLE processes ADD COLUMN area TEXT NOT NULL DEFAULT '';
