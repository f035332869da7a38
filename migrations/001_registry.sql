-- The registry: what was fitted, from what, with which settings, and which
-- version of each model the stable views show. Unqualified names land in the
-- registry schema: the runner sets search_path to it before this file runs.

-- One row per fitted version of a named model.
CREATE TABLE models (
    name          text        NOT NULL,
    version       integer     NOT NULL CHECK (version >= 1),
    -- running: a live run holds the model's advisory lock;
    -- ready: complete, its result table exists;
    -- failed: the run died; pruned: its result tables were dropped.
    status        text        NOT NULL CHECK (status IN ('running', 'ready', 'failed', 'pruned')),
    method        text        NOT NULL CHECK (method IN ('kmeans', 'gmm')),
    algorithm     text,
    k             integer     NOT NULL CHECK (k >= 1),
    features      text[]      NOT NULL,
    key_column    text        NOT NULL,
    key_type      text        NOT NULL,
    query         text        NOT NULL,
    scale         text        NOT NULL CHECK (scale IN ('none', 'standard', 'robust')),
    center        float8[],   -- subtracted from each feature before fitting
    spread        float8[],   -- then divided by
    rows_read     bigint,
    rows_used     bigint,
    rows_skipped  bigint,
    inertia       float8,     -- sum of squared distances to own centre, fitted units
    iterations    integer,
    converged     boolean,
    stop_reason   text,
    seed          bigint      NOT NULL,
    restarts      integer     NOT NULL,
    max_iter      integer     NOT NULL,
    tol           float8      NOT NULL,
    result_table  text,
    backend_pid   integer,
    run_by        text        NOT NULL DEFAULT current_user,
    started_at    timestamptz NOT NULL DEFAULT clock_timestamp(),
    finished_at   timestamptz,
    tool_version  text        NOT NULL,
    PRIMARY KEY (name, version)
);

-- One row per cluster of a version, numbered from 1 by descending size.
CREATE TABLE components (
    name     text     NOT NULL,
    version  integer  NOT NULL,
    cluster  integer  NOT NULL CHECK (cluster >= 1),
    size     bigint   NOT NULL,
    weight   float8   NOT NULL,
    center   float8[] NOT NULL, -- original feature units
    fitted_center float8[] NOT NULL, -- the same in the units the fit used (after scaling); scoring uses these
    PRIMARY KEY (name, version, cluster),
    FOREIGN KEY (name, version) REFERENCES models ON DELETE CASCADE
);

-- Every change of the version that a model's stable views show. The newest
-- row per name is the published version.
CREATE TABLE publications (
    name          text        NOT NULL,
    version       integer     NOT NULL,
    published_at  timestamptz NOT NULL DEFAULT clock_timestamp(),
    published_by  text        NOT NULL DEFAULT current_user,
    FOREIGN KEY (name, version) REFERENCES models ON DELETE CASCADE
);
CREATE INDEX publications_name_time ON publications (name, published_at DESC);
