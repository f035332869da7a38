CREATE FUNCTION "assort"."colours_v3_cluster_of"("s1" float8, "s2" float8) RETURNS integer
LANGUAGE sql IMMUTABLE PARALLEL SAFE STRICT COST 596
AS $fn$
SELECT CASE LEAST($1, $2)
  WHEN $1 THEN 2
  WHEN $2 THEN 1
END
$fn$;

COMMENT ON FUNCTION "assort"."colours_v3_cluster_of"(float8, float8) IS E'Helper of colours_v3_cluster: the cluster given the squared distances to the centres, in the model''s order';

CREATE FUNCTION "assort"."colours_v3_cluster"("g_r" float8, "odd ""name""" float8) RETURNS integer
LANGUAGE sql IMMUTABLE PARALLEL SAFE
AS $fn$
SELECT CASE WHEN ($1 - $1) = 0::float8 AND ($2 - $2) = 0::float8 THEN
"assort"."colours_v3_cluster_of"(
((((($1 - 0.1::float8) / 0.3333333333333333::float8) - 0::float8) * ((($1 - 0.1::float8) / 0.3333333333333333::float8) - 0::float8)) + (((($2 - (-3.25e-07::float8)) / 2::float8) - 1.5::float8) * ((($2 - (-3.25e-07::float8)) / 2::float8) - 1.5::float8))),
((((($1 - 0.1::float8) / 0.3333333333333333::float8) - 0.75::float8) * ((($1 - 0.1::float8) / 0.3333333333333333::float8) - 0.75::float8)) + (((($2 - (-3.25e-07::float8)) / 2::float8) - 5e-324::float8) * ((($2 - (-3.25e-07::float8)) / 2::float8) - 5e-324::float8))))
END
$fn$;

COMMENT ON FUNCTION "assort"."colours_v3_cluster"(float8, float8) IS E'Cluster of a row under colours@3 (kmeans; features g_r, odd "name"), computed as assort computes it';

CREATE OR REPLACE FUNCTION "assort"."colours_cluster"("g_r" float8, "odd ""name""" float8) RETURNS integer
LANGUAGE sql STABLE PARALLEL SAFE
AS $fn$
SELECT "assort"."colours_v3_cluster"($1, $2)
$fn$;

COMMENT ON FUNCTION "assort"."colours_cluster"(float8, float8) IS E'Cluster of a row under the published version of colours (now colours@3)';

DROP FUNCTION IF EXISTS "assort"."colours_v3_cluster"(float8, float8);

DROP FUNCTION IF EXISTS "assort"."colours_v3_cluster_of";

DROP FUNCTION IF EXISTS "assort"."colours_cluster"(float8, float8);
