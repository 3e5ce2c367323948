-- 0008: the database's own identity, made once when the schema reaches this version. What the lab
-- publishes carries it, so a consumer tells one database's sequence numbers from another's: a new lab PC
-- or a fresh demo starts its `seq` at 1 again under a new identity, and a copy made with `oedolog backup`
-- keeps the identity of the database it copies.
CREATE TABLE store_identity (
    one INTEGER PRIMARY KEY CHECK (one = 1),                -- a single row
    id  TEXT NOT NULL CHECK (length(id) = 32 AND id NOT GLOB '*[^0-9a-f]*')  -- 128 random bits, lower-case hex
);
INSERT INTO store_identity (one, id) VALUES (1, lower(hex(randomblob(16))));
