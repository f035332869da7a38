CREATE FUNCTION "assort"."pops_v1_cluster"("x" float8, "y" float8) RETURNS integer
LANGUAGE sql IMMUTABLE PARALLEL SAFE
AS $fn$
SELECT CASE WHEN ($1 - $1) = 0::float8 AND ($2 - $2) = 0::float8 THEN
CASE
  WHEN (((-3.3216577647029926::float8) - (0.5::float8 * (((($1 - 0.5::float8) * 0.5::float8) * (($1 - 0.5::float8) * 0.5::float8)) + (((($2 - (-1::float8)) - (0.5::float8 * (($1 - 0.5::float8) * 0.5::float8))) * 0.7559289460184544::float8) * ((($2 - (-1::float8)) - (0.5::float8 * (($1 - 0.5::float8) * 0.5::float8))) * 0.7559289460184544::float8))))) - GREATEST(((-3.3216577647029926::float8) - (0.5::float8 * (((($1 - 0.5::float8) * 0.5::float8) * (($1 - 0.5::float8) * 0.5::float8)) + (((($2 - (-1::float8)) - (0.5::float8 * (($1 - 0.5::float8) * 0.5::float8))) * 0.7559289460184544::float8) * ((($2 - (-1::float8)) - (0.5::float8 * (($1 - 0.5::float8) * 0.5::float8))) * 0.7559289460184544::float8))))), ((-3.85278008695161::float8) - (0.5::float8 * (((($1 - 3::float8) * 1::float8) * (($1 - 3::float8) * 1::float8)) + (((($2 - 2.25::float8) - (0::float8 * (($1 - 3::float8) * 1::float8))) * 0.3333333333333333::float8) * ((($2 - 2.25::float8) - (0::float8 * (($1 - 3::float8) * 1::float8))) * 0.3333333333333333::float8))))))) >= (-5.551115123125783e-17::float8) THEN 1
  WHEN (((-3.85278008695161::float8) - (0.5::float8 * (((($1 - 3::float8) * 1::float8) * (($1 - 3::float8) * 1::float8)) + (((($2 - 2.25::float8) - (0::float8 * (($1 - 3::float8) * 1::float8))) * 0.3333333333333333::float8) * ((($2 - 2.25::float8) - (0::float8 * (($1 - 3::float8) * 1::float8))) * 0.3333333333333333::float8))))) - GREATEST(((-3.3216577647029926::float8) - (0.5::float8 * (((($1 - 0.5::float8) * 0.5::float8) * (($1 - 0.5::float8) * 0.5::float8)) + (((($2 - (-1::float8)) - (0.5::float8 * (($1 - 0.5::float8) * 0.5::float8))) * 0.7559289460184544::float8) * ((($2 - (-1::float8)) - (0.5::float8 * (($1 - 0.5::float8) * 0.5::float8))) * 0.7559289460184544::float8))))), ((-3.85278008695161::float8) - (0.5::float8 * (((($1 - 3::float8) * 1::float8) * (($1 - 3::float8) * 1::float8)) + (((($2 - 2.25::float8) - (0::float8 * (($1 - 3::float8) * 1::float8))) * 0.3333333333333333::float8) * ((($2 - 2.25::float8) - (0::float8 * (($1 - 3::float8) * 1::float8))) * 0.3333333333333333::float8))))))) >= (-5.551115123125783e-17::float8) THEN 2
END
END
$fn$;

COMMENT ON FUNCTION "assort"."pops_v1_cluster"(float8, float8) IS E'Cluster of a row under pops@1 (gmm; features x, y), computed as assort computes it';

CREATE FUNCTION "assort"."pops_v1_probability"("x" float8, "y" float8) RETURNS float8
LANGUAGE sql IMMUTABLE PARALLEL SAFE
AS $fn$
SELECT CASE WHEN ($1 - $1) = 0::float8 AND ($2 - $2) = 0::float8 THEN
(1::float8 / (pg_catalog.exp(GREATEST((((-3.3216577647029926::float8) - (0.5::float8 * (((($1 - 0.5::float8) * 0.5::float8) * (($1 - 0.5::float8) * 0.5::float8)) + (((($2 - (-1::float8)) - (0.5::float8 * (($1 - 0.5::float8) * 0.5::float8))) * 0.7559289460184544::float8) * ((($2 - (-1::float8)) - (0.5::float8 * (($1 - 0.5::float8) * 0.5::float8))) * 0.7559289460184544::float8))))) - GREATEST(((-3.3216577647029926::float8) - (0.5::float8 * (((($1 - 0.5::float8) * 0.5::float8) * (($1 - 0.5::float8) * 0.5::float8)) + (((($2 - (-1::float8)) - (0.5::float8 * (($1 - 0.5::float8) * 0.5::float8))) * 0.7559289460184544::float8) * ((($2 - (-1::float8)) - (0.5::float8 * (($1 - 0.5::float8) * 0.5::float8))) * 0.7559289460184544::float8))))), ((-3.85278008695161::float8) - (0.5::float8 * (((($1 - 3::float8) * 1::float8) * (($1 - 3::float8) * 1::float8)) + (((($2 - 2.25::float8) - (0::float8 * (($1 - 3::float8) * 1::float8))) * 0.3333333333333333::float8) * ((($2 - 2.25::float8) - (0::float8 * (($1 - 3::float8) * 1::float8))) * 0.3333333333333333::float8))))))), (-708::float8))) + pg_catalog.exp(GREATEST((((-3.85278008695161::float8) - (0.5::float8 * (((($1 - 3::float8) * 1::float8) * (($1 - 3::float8) * 1::float8)) + (((($2 - 2.25::float8) - (0::float8 * (($1 - 3::float8) * 1::float8))) * 0.3333333333333333::float8) * ((($2 - 2.25::float8) - (0::float8 * (($1 - 3::float8) * 1::float8))) * 0.3333333333333333::float8))))) - GREATEST(((-3.3216577647029926::float8) - (0.5::float8 * (((($1 - 0.5::float8) * 0.5::float8) * (($1 - 0.5::float8) * 0.5::float8)) + (((($2 - (-1::float8)) - (0.5::float8 * (($1 - 0.5::float8) * 0.5::float8))) * 0.7559289460184544::float8) * ((($2 - (-1::float8)) - (0.5::float8 * (($1 - 0.5::float8) * 0.5::float8))) * 0.7559289460184544::float8))))), ((-3.85278008695161::float8) - (0.5::float8 * (((($1 - 3::float8) * 1::float8) * (($1 - 3::float8) * 1::float8)) + (((($2 - 2.25::float8) - (0::float8 * (($1 - 3::float8) * 1::float8))) * 0.3333333333333333::float8) * ((($2 - 2.25::float8) - (0::float8 * (($1 - 3::float8) * 1::float8))) * 0.3333333333333333::float8))))))), (-708::float8)))))
END
$fn$;

COMMENT ON FUNCTION "assort"."pops_v1_probability"(float8, float8) IS E'Membership probability of its cluster of a row under pops@1 (gmm; features x, y), computed as assort computes it';

CREATE FUNCTION "assort"."pops_v1_log_density"("x" float8, "y" float8) RETURNS float8
LANGUAGE sql IMMUTABLE PARALLEL SAFE
AS $fn$
SELECT CASE WHEN ($1 - $1) = 0::float8 AND ($2 - $2) = 0::float8 THEN
(GREATEST(((-3.3216577647029926::float8) - (0.5::float8 * (((($1 - 0.5::float8) * 0.5::float8) * (($1 - 0.5::float8) * 0.5::float8)) + (((($2 - (-1::float8)) - (0.5::float8 * (($1 - 0.5::float8) * 0.5::float8))) * 0.7559289460184544::float8) * ((($2 - (-1::float8)) - (0.5::float8 * (($1 - 0.5::float8) * 0.5::float8))) * 0.7559289460184544::float8))))), ((-3.85278008695161::float8) - (0.5::float8 * (((($1 - 3::float8) * 1::float8) * (($1 - 3::float8) * 1::float8)) + (((($2 - 2.25::float8) - (0::float8 * (($1 - 3::float8) * 1::float8))) * 0.3333333333333333::float8) * ((($2 - 2.25::float8) - (0::float8 * (($1 - 3::float8) * 1::float8))) * 0.3333333333333333::float8)))))) + pg_catalog.ln((pg_catalog.exp(GREATEST((((-3.3216577647029926::float8) - (0.5::float8 * (((($1 - 0.5::float8) * 0.5::float8) * (($1 - 0.5::float8) * 0.5::float8)) + (((($2 - (-1::float8)) - (0.5::float8 * (($1 - 0.5::float8) * 0.5::float8))) * 0.7559289460184544::float8) * ((($2 - (-1::float8)) - (0.5::float8 * (($1 - 0.5::float8) * 0.5::float8))) * 0.7559289460184544::float8))))) - GREATEST(((-3.3216577647029926::float8) - (0.5::float8 * (((($1 - 0.5::float8) * 0.5::float8) * (($1 - 0.5::float8) * 0.5::float8)) + (((($2 - (-1::float8)) - (0.5::float8 * (($1 - 0.5::float8) * 0.5::float8))) * 0.7559289460184544::float8) * ((($2 - (-1::float8)) - (0.5::float8 * (($1 - 0.5::float8) * 0.5::float8))) * 0.7559289460184544::float8))))), ((-3.85278008695161::float8) - (0.5::float8 * (((($1 - 3::float8) * 1::float8) * (($1 - 3::float8) * 1::float8)) + (((($2 - 2.25::float8) - (0::float8 * (($1 - 3::float8) * 1::float8))) * 0.3333333333333333::float8) * ((($2 - 2.25::float8) - (0::float8 * (($1 - 3::float8) * 1::float8))) * 0.3333333333333333::float8))))))), (-708::float8))) + pg_catalog.exp(GREATEST((((-3.85278008695161::float8) - (0.5::float8 * (((($1 - 3::float8) * 1::float8) * (($1 - 3::float8) * 1::float8)) + (((($2 - 2.25::float8) - (0::float8 * (($1 - 3::float8) * 1::float8))) * 0.3333333333333333::float8) * ((($2 - 2.25::float8) - (0::float8 * (($1 - 3::float8) * 1::float8))) * 0.3333333333333333::float8))))) - GREATEST(((-3.3216577647029926::float8) - (0.5::float8 * (((($1 - 0.5::float8) * 0.5::float8) * (($1 - 0.5::float8) * 0.5::float8)) + (((($2 - (-1::float8)) - (0.5::float8 * (($1 - 0.5::float8) * 0.5::float8))) * 0.7559289460184544::float8) * ((($2 - (-1::float8)) - (0.5::float8 * (($1 - 0.5::float8) * 0.5::float8))) * 0.7559289460184544::float8))))), ((-3.85278008695161::float8) - (0.5::float8 * (((($1 - 3::float8) * 1::float8) * (($1 - 3::float8) * 1::float8)) + (((($2 - 2.25::float8) - (0::float8 * (($1 - 3::float8) * 1::float8))) * 0.3333333333333333::float8) * ((($2 - 2.25::float8) - (0::float8 * (($1 - 3::float8) * 1::float8))) * 0.3333333333333333::float8))))))), (-708::float8))))))
END
$fn$;

COMMENT ON FUNCTION "assort"."pops_v1_log_density"(float8, float8) IS E'Natural log of the mixture density (fitted space) of a row under pops@1 (gmm; features x, y), computed as assort computes it';

CREATE OR REPLACE FUNCTION "assort"."pops_cluster"("x" float8, "y" float8) RETURNS integer
LANGUAGE sql STABLE PARALLEL SAFE
AS $fn$
SELECT "assort"."pops_v1_cluster"($1, $2)
$fn$;

COMMENT ON FUNCTION "assort"."pops_cluster"(float8, float8) IS E'Cluster of a row under the published version of pops (now pops@1)';

CREATE OR REPLACE FUNCTION "assort"."pops_probability"("x" float8, "y" float8) RETURNS float8
LANGUAGE sql STABLE PARALLEL SAFE
AS $fn$
SELECT "assort"."pops_v1_probability"($1, $2)
$fn$;

COMMENT ON FUNCTION "assort"."pops_probability"(float8, float8) IS E'Membership probability of its cluster of a row under the published version of pops (now pops@1)';

CREATE OR REPLACE FUNCTION "assort"."pops_log_density"("x" float8, "y" float8) RETURNS float8
LANGUAGE sql STABLE PARALLEL SAFE
AS $fn$
SELECT "assort"."pops_v1_log_density"($1, $2)
$fn$;

COMMENT ON FUNCTION "assort"."pops_log_density"(float8, float8) IS E'Natural log of the mixture density (fitted space) of a row under the published version of pops (now pops@1)';

DROP FUNCTION IF EXISTS "assort"."pops_v1_cluster"(float8, float8);

DROP FUNCTION IF EXISTS "assort"."pops_v1_cluster_of";

DROP FUNCTION IF EXISTS "assort"."pops_v1_probability"(float8, float8);

DROP FUNCTION IF EXISTS "assort"."pops_v1_probability_of";

DROP FUNCTION IF EXISTS "assort"."pops_v1_log_density"(float8, float8);

DROP FUNCTION IF EXISTS "assort"."pops_v1_log_density_of";

DROP FUNCTION IF EXISTS "assort"."pops_cluster"(float8, float8);

DROP FUNCTION IF EXISTS "assort"."pops_probability"(float8, float8);

DROP FUNCTION IF EXISTS "assort"."pops_log_density"(float8, float8);
