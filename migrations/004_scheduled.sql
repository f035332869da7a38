-- Scheduled operation: stable cluster numbers (how a version's clusters were
-- matched to the previously published version's) and scoring of new rows.
ALTER TABLE models
    ADD COLUMN renumbered_against integer, -- the published version matched, NULL when not renumbered
    ADD COLUMN renumber_basis     text,    -- 'centres' or 'shared rows'
    ADD COLUMN renumber_cost      float8;  -- total cost of the matching

ALTER TABLE components
    ADD COLUMN fitted_order   integer, -- the cluster's number before renumbering (by descending size)
    ADD COLUMN matched_cluster integer, -- its counterpart in renumbered_against, NULL when none
    ADD COLUMN match_cost     float8;   -- the cost of that pair

-- Every scoring of new rows with a stored version.
CREATE TABLE scorings (
    name       text        NOT NULL,
    version    integer     NOT NULL,
    mode       text        NOT NULL CHECK (mode IN ('upsert', 'replace')),
    query      text        NOT NULL,
    rows_read  bigint      NOT NULL,
    rows_used  bigint      NOT NULL,
    rows_skipped bigint    NOT NULL,
    scored_at  timestamptz NOT NULL DEFAULT clock_timestamp(),
    scored_by  text        NOT NULL DEFAULT current_user,
    FOREIGN KEY (name, version) REFERENCES models ON DELETE CASCADE
);
