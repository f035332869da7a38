CREATE FUNCTION "my schema"."pops_v12_cluster_of"("s1" float8, "s2" float8) RETURNS integer
LANGUAGE sql IMMUTABLE PARALLEL SAFE STRICT COST 692
AS $fn$
SELECT CASE
  WHEN ($1 - GREATEST($1, $2)) >= (-5.551115123125783e-17::float8) THEN 1
  WHEN ($2 - GREATEST($1, $2)) >= (-5.551115123125783e-17::float8) THEN 2
END
$fn$;

COMMENT ON FUNCTION "my schema"."pops_v12_cluster_of"(float8, float8) IS E'Helper of pops_v12_cluster: the cluster given the log weighted densities of the components, in the model''s order';

CREATE FUNCTION "my schema"."pops_v12_cluster"("x" float8, "y" float8) RETURNS integer
LANGUAGE sql IMMUTABLE PARALLEL SAFE
AS $fn$
SELECT CASE WHEN ($1 - $1) = 0::float8 AND ($2 - $2) = 0::float8 THEN
"my schema"."pops_v12_cluster_of"(
((-3.3216577647029926::float8) - (0.5::float8 * (((($1 - 0.5::float8) * 0.5::float8) * (($1 - 0.5::float8) * 0.5::float8)) + ((($2 - (-1::float8)) * 0.7559289460184544::float8) * (($2 - (-1::float8)) * 0.7559289460184544::float8))))),
((-3.85278008695161::float8) - (0.5::float8 * (((($1 - 3::float8) * 1::float8) * (($1 - 3::float8) * 1::float8)) + ((($2 - 2.25::float8) * 0.3333333333333333::float8) * (($2 - 2.25::float8) * 0.3333333333333333::float8))))))
END
$fn$;

COMMENT ON FUNCTION "my schema"."pops_v12_cluster"(float8, float8) IS E'Cluster of a row under pops@12 (gmm; features x, y), computed as assort computes it';

CREATE FUNCTION "my schema"."pops_v12_probability_of"("s1" float8, "s2" float8) RETURNS float8
LANGUAGE sql IMMUTABLE PARALLEL SAFE STRICT COST 836
AS $fn$
SELECT (1::float8 / (pg_catalog.exp(GREATEST(($1 - GREATEST($1, $2)), (-708::float8))) + pg_catalog.exp(GREATEST(($2 - GREATEST($1, $2)), (-708::float8)))))
$fn$;

COMMENT ON FUNCTION "my schema"."pops_v12_probability_of"(float8, float8) IS E'Helper of pops_v12_probability: the membership probability of its cluster given the log weighted densities of the components, in the model''s order';

CREATE FUNCTION "my schema"."pops_v12_probability"("x" float8, "y" float8) RETURNS float8
LANGUAGE sql IMMUTABLE PARALLEL SAFE
AS $fn$
SELECT CASE WHEN ($1 - $1) = 0::float8 AND ($2 - $2) = 0::float8 THEN
"my schema"."pops_v12_probability_of"(
((-3.3216577647029926::float8) - (0.5::float8 * (((($1 - 0.5::float8) * 0.5::float8) * (($1 - 0.5::float8) * 0.5::float8)) + ((($2 - (-1::float8)) * 0.7559289460184544::float8) * (($2 - (-1::float8)) * 0.7559289460184544::float8))))),
((-3.85278008695161::float8) - (0.5::float8 * (((($1 - 3::float8) * 1::float8) * (($1 - 3::float8) * 1::float8)) + ((($2 - 2.25::float8) * 0.3333333333333333::float8) * (($2 - 2.25::float8) * 0.3333333333333333::float8))))))
END
$fn$;

COMMENT ON FUNCTION "my schema"."pops_v12_probability"(float8, float8) IS E'Membership probability of its cluster of a row under pops@12 (gmm; features x, y), computed as assort computes it';

CREATE FUNCTION "my schema"."pops_v12_log_density_of"("s1" float8, "s2" float8) RETURNS float8
LANGUAGE sql IMMUTABLE PARALLEL SAFE STRICT COST 908
AS $fn$
SELECT (GREATEST($1, $2) + pg_catalog.ln((pg_catalog.exp(GREATEST(($1 - GREATEST($1, $2)), (-708::float8))) + pg_catalog.exp(GREATEST(($2 - GREATEST($1, $2)), (-708::float8))))))
$fn$;

COMMENT ON FUNCTION "my schema"."pops_v12_log_density_of"(float8, float8) IS E'Helper of pops_v12_log_density: the natural log of the mixture density (fitted space) given the log weighted densities of the components, in the model''s order';

CREATE FUNCTION "my schema"."pops_v12_log_density"("x" float8, "y" float8) RETURNS float8
LANGUAGE sql IMMUTABLE PARALLEL SAFE
AS $fn$
SELECT CASE WHEN ($1 - $1) = 0::float8 AND ($2 - $2) = 0::float8 THEN
"my schema"."pops_v12_log_density_of"(
((-3.3216577647029926::float8) - (0.5::float8 * (((($1 - 0.5::float8) * 0.5::float8) * (($1 - 0.5::float8) * 0.5::float8)) + ((($2 - (-1::float8)) * 0.7559289460184544::float8) * (($2 - (-1::float8)) * 0.7559289460184544::float8))))),
((-3.85278008695161::float8) - (0.5::float8 * (((($1 - 3::float8) * 1::float8) * (($1 - 3::float8) * 1::float8)) + ((($2 - 2.25::float8) * 0.3333333333333333::float8) * (($2 - 2.25::float8) * 0.3333333333333333::float8))))))
END
$fn$;

COMMENT ON FUNCTION "my schema"."pops_v12_log_density"(float8, float8) IS E'Natural log of the mixture density (fitted space) of a row under pops@12 (gmm; features x, y), computed as assort computes it';

CREATE OR REPLACE FUNCTION "my schema"."pops_cluster"("x" float8, "y" float8) RETURNS integer
LANGUAGE sql STABLE PARALLEL SAFE
AS $fn$
SELECT "my schema"."pops_v12_cluster"($1, $2)
$fn$;

COMMENT ON FUNCTION "my schema"."pops_cluster"(float8, float8) IS E'Cluster of a row under the published version of pops (now pops@12)';

CREATE OR REPLACE FUNCTION "my schema"."pops_probability"("x" float8, "y" float8) RETURNS float8
LANGUAGE sql STABLE PARALLEL SAFE
AS $fn$
SELECT "my schema"."pops_v12_probability"($1, $2)
$fn$;

COMMENT ON FUNCTION "my schema"."pops_probability"(float8, float8) IS E'Membership probability of its cluster of a row under the published version of pops (now pops@12)';

CREATE OR REPLACE FUNCTION "my schema"."pops_log_density"("x" float8, "y" float8) RETURNS float8
LANGUAGE sql STABLE PARALLEL SAFE
AS $fn$
SELECT "my schema"."pops_v12_log_density"($1, $2)
$fn$;

COMMENT ON FUNCTION "my schema"."pops_log_density"(float8, float8) IS E'Natural log of the mixture density (fitted space) of a row under the published version of pops (now pops@12)';

DROP FUNCTION IF EXISTS "my schema"."pops_v12_cluster"(float8, float8);

DROP FUNCTION IF EXISTS "my schema"."pops_v12_cluster_of";

DROP FUNCTION IF EXISTS "my schema"."pops_v12_probability"(float8, float8);

DROP FUNCTION IF EXISTS "my schema"."pops_v12_probability_of";

DROP FUNCTION IF EXISTS "my schema"."pops_v12_log_density"(float8, float8);

DROP FUNCTION IF EXISTS "my schema"."pops_v12_log_density_of";

DROP FUNCTION IF EXISTS "my schema"."pops_cluster"(float8, float8);

DROP FUNCTION IF EXISTS "my schema"."pops_probability"(float8, float8);

DROP FUNCTION IF EXISTS "my schema"."pops_log_density"(float8, float8);
