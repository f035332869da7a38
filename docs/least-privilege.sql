-- Least-privilege set-up for assort: two roles, run once by a DBA (a
-- superuser, or a role with CREATEROLE that owns the catalogue and may
-- create schemas), for example with
--
--     psql -v ON_ERROR_STOP=1 -1 -d catalogue -f docs/least-privilege.sql
--
-- The names below are examples: the catalogue schema "survey" with its table
-- "survey.sources", the read-only role "assort_reader", the role that runs
-- assort "assort_owner", and the output schema "assort". Change them all
-- together. cmd/assort/privilege_test.go runs this file, with the names
-- changed, against a real server.
--
-- assort uses one role per run. That role must be able to read the
-- catalogue (the --query runs inside a READ ONLY transaction, but the
-- privileges are what stop writes that a function could make) and must own
-- the output schema, where `assort migrate` creates the registry and every
-- fit creates its result tables and views. So:
--
--   assort_reader  can only read: USAGE on the catalogue schema and SELECT on
--                  its tables. It cannot log in.
--   assort_owner   logs in, inherits assort_reader's privileges, and owns
--                  the schema "assort". It needs no CREATE on the database
--                  (it cannot create schemas), owns nothing in the
--                  catalogue, and is not a superuser.
--
-- Analysts who only read the clusters get USAGE on the schema "assort" and
-- SELECT on its tables and views (the last statements, commented out).

-- The read-only role.
CREATE ROLE assort_reader NOLOGIN;
GRANT USAGE ON SCHEMA survey TO assort_reader;
GRANT SELECT ON survey.sources TO assort_reader;
-- To let assort read every table of the schema, now and later, instead:
--   GRANT SELECT ON ALL TABLES IN SCHEMA survey TO assort_reader;
--   ALTER DEFAULT PRIVILEGES IN SCHEMA survey GRANT SELECT ON TABLES TO assort_reader;

-- The role assort runs as. INHERIT is the default: the member uses
-- assort_reader's privileges without SET ROLE. Give it a password with
-- psql's \password assort_owner (or use your usual authentication).
CREATE ROLE assort_owner LOGIN INHERIT IN ROLE assort_reader;

-- The output schema, created by the DBA and owned by assort_owner: there
-- `assort migrate` creates the registry and `assort fit` its tables.
CREATE SCHEMA assort AUTHORIZATION assort_owner;

-- PUBLIC may connect to a new database by default. Where that was revoked:
--   GRANT CONNECT ON DATABASE catalogue TO assort_owner;

-- Then, as assort_owner:
--   assort migrate -d postgres://assort_owner@dbhost/catalogue
--   assort fit galaxies -d postgres://assort_owner@dbhost/catalogue \
--       --query 'SELECT source_id, g_r, r_i FROM survey.sources' --key source_id --k 6

-- Optional: analysts who read the clusters.
--   CREATE ROLE assort_analyst NOLOGIN;
--   GRANT USAGE ON SCHEMA assort TO assort_analyst;
--   ALTER DEFAULT PRIVILEGES FOR ROLE assort_owner IN SCHEMA assort GRANT SELECT ON TABLES TO assort_analyst;
