-- Version numbers that are never given twice, and an order of publications
-- that does not depend on the server's clock.

-- The highest version number of a model name that `assort drop NAME@V` has
-- removed. A new version is numbered above both the versions in models and
-- this, so the number of a dropped version is never given to a later fit:
-- a comparison (against_version) or a renumbering (renumbered_against) that
-- names a dropped version cannot be read as naming a newer one. Dropping a
-- whole model (`assort drop NAME`) removes its row with every other trace
-- of the name. A run that fails leaves no row of its own and writes
-- nothing here.
CREATE TABLE retired_versions (
    name          text    PRIMARY KEY,
    last_version  integer NOT NULL CHECK (last_version > 0)
);

-- Publications numbered in the order they were made. The published version
-- of a name is that of its publication with the highest seq; published_at
-- (clock_timestamp()) stays for people, but a clock stepped back (NTP,
-- failover to a server with another clock) can no longer change which
-- version the views are said to show. Existing rows are numbered in the
-- order of their timestamps.
ALTER TABLE publications ADD COLUMN seq bigint;
UPDATE publications p SET seq = o.n
FROM (SELECT ctid, row_number() OVER (ORDER BY published_at, ctid) AS n FROM publications) o
WHERE p.ctid = o.ctid;
ALTER TABLE publications ALTER COLUMN seq SET NOT NULL;
ALTER TABLE publications ALTER COLUMN seq ADD GENERATED ALWAYS AS IDENTITY;
SELECT setval(pg_get_serial_sequence('publications', 'seq'), coalesce(max(seq), 0) + 1, false) FROM publications;
CREATE UNIQUE INDEX publications_name_seq ON publications (name, seq DESC);
DROP INDEX publications_name_time;
