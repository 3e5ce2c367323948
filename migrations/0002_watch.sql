-- 0002: what the live watch decides about an increment, so a restart loses nothing.

-- When end of primary was established (the frame became ready for its next load), UTC µs.
ALTER TABLE increments ADD COLUMN ready_us INTEGER;
-- How the onset t0 was found: 'load-step' or 'deformation' (NULL while armed).
ALTER TABLE increments ADD COLUMN onset_source TEXT;
-- Stress on the specimen before this increment, kPa (the seating stress for the first).
ALTER TABLE increments ADD COLUMN from_kpa REAL;
-- Seating stress of the test, kPa.
ALTER TABLE tests ADD COLUMN seating_kpa REAL;
