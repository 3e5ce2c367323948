-- 0005: a load step can be marked void by an operator: kept with its readings, shown, and left out of the
-- test's reduction. NULL void_us: the step counts. Withdrawing a step that never began deletes its row;
-- the journal keeps what was withdrawn and by whom.
ALTER TABLE increments ADD COLUMN void_us INTEGER;
ALTER TABLE increments ADD COLUMN void_by TEXT;
ALTER TABLE increments ADD COLUMN void_reason TEXT;
