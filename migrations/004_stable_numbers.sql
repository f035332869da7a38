-- Stable cluster numbers: how a version's clusters were matched to the
-- previously published version's.
ALTER TABLE models
    ADD COLUMN renumbered_against integer, -- the published version matched, NULL when not renumbered
    ADD COLUMN renumber_basis     text,    -- 'centres' or 'shared rows'
    ADD COLUMN renumber_cost      float8;  -- total cost of the matching

ALTER TABLE components
    ADD COLUMN fitted_order   integer, -- the cluster's number before renumbering (by descending size)
    ADD COLUMN matched_cluster integer, -- its counterpart in renumbered_against, NULL when none
    ADD COLUMN match_cost     float8;   -- the cost of that pair
