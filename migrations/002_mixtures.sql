-- Gaussian mixtures: likelihood-based figures on models, covariances and
-- weights on components.
ALTER TABLE models
    ADD COLUMN covariance       text CHECK (covariance IN ('full', 'diag', 'spherical', 'pooled')),
    ADD COLUMN log_likelihood   float8, -- total over rows used, natural log, fitted units
    ADD COLUMN bic              float8, -- -2 log L + p ln n
    ADD COLUMN aic              float8, -- -2 log L + 2 p
    ADD COLUMN params           integer, -- p, free parameters
    ADD COLUMN reg              float8,
    ADD COLUMN membership_floor float8,
    ADD COLUMN events           text[];

-- d×d, row-major, original feature units, whatever the covariance structure.
ALTER TABLE components
    ADD COLUMN covariance        float8[],
    ADD COLUMN fitted_covariance float8[]; -- the same in the units the fit used
