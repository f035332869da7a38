-- Scoring inside SQL: whether a version has its SQL scoring functions
-- (NAME_vV_cluster and, for mixtures, NAME_vV_probability and
-- NAME_vV_log_density).
ALTER TABLE models ADD COLUMN functions boolean NOT NULL DEFAULT false;
