-- Choosing k: every candidate fitted for a version, with its criteria.
CREATE TABLE candidates (
    name            text    NOT NULL,
    version         integer NOT NULL,
    k               integer NOT NULL CHECK (k >= 1),
    inertia         float8,  -- within-cluster sum of squares, fitted units (elbow reading)
    log_likelihood  float8,  -- mixtures; for k-means, under the identical spherical Gaussian model
    params          integer, -- free parameters in the criteria
    bic             float8,  -- -2 log L + p ln n; lower is better
    aic             float8,  -- -2 log L + 2p; lower is better
    icl             float8,  -- mixtures: BIC + 2 × entropy of the memberships; lower is better
    silhouette      float8,  -- k-means: mean silhouette width on a seeded sample; higher is better
    iterations      integer,
    converged       boolean,
    chosen          boolean NOT NULL,
    PRIMARY KEY (name, version, k),
    FOREIGN KEY (name, version) REFERENCES models ON DELETE CASCADE
);

ALTER TABLE models
    ADD COLUMN criterion  text,      -- what chose k among the candidates
    ADD COLUMN candidates integer[]; -- the k values tried

-- Agreement of a version with a known labelling, or with another version.
CREATE TABLE comparisons (
    id              bigint  GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
    name            text    NOT NULL,
    version         integer NOT NULL,
    against_version integer,  -- set when comparing two versions
    labels_query    text,     -- set when comparing with a labelling
    rows_common     bigint  NOT NULL,
    rows_model_only bigint  NOT NULL, -- rows of the version with no label
    rows_other_only bigint  NOT NULL, -- labelled rows (or rows of the other version) not in this version
    clusters        integer NOT NULL,
    labels          integer NOT NULL,
    accuracy        float8,   -- share of common rows in matched cells (Hungarian method)
    ari             float8,   -- adjusted Rand index
    nmi             float8,   -- normalised mutual information
    compared_at     timestamptz NOT NULL DEFAULT clock_timestamp(),
    compared_by     text    NOT NULL DEFAULT current_user,
    FOREIGN KEY (name, version) REFERENCES models ON DELETE CASCADE,
    CHECK ((against_version IS NULL) <> (labels_query IS NULL))
);

-- The confusion matrix of a comparison: one row per non-empty cell.
CREATE TABLE comparison_cells (
    comparison  bigint  NOT NULL REFERENCES comparisons ON DELETE CASCADE,
    cluster     integer NOT NULL,
    label       text    NOT NULL, -- the label as text, or the other version's cluster
    rows        bigint  NOT NULL,
    matched     boolean NOT NULL, -- the cell is in the one-to-one matching
    PRIMARY KEY (comparison, cluster, label)
);
