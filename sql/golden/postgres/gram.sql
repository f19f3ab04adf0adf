SELECT
  k0,
  COUNT(*) AS n,
  SUM(v0) AS s0,
  SUM(v1) AS s1,
  SUM(v2) AS s2,
  SUM(v0 * v0) AS g0_0,
  SUM(v0 * v1) AS g0_1,
  SUM(v0 * v2) AS g0_2,
  SUM(v1 * v1) AS g1_1,
  SUM(v1 * v2) AS g1_2,
  SUM(v2 * v2) AS g2_2
FROM
  (
    SELECT
      "voucher" AS k0,
      (CAST("prior_orders" AS DOUBLE PRECISION) - 2.65) / 1.7 AS v0,
      (CASE WHEN CAST("zone" AS VARCHAR) = 'Old Town' THEN 1.0 ELSE 0.0 END - 0.17) / 0.375 AS v1,
      (CAST("say ""hi""" AS DOUBLE PRECISION) - -1e-7) / 3.0 AS v2
    FROM
      "main"."order lines" AS src
    WHERE
      ("zone" <> 'Old Town' AND prior_orders >= 0) AND "voucher" IS NOT NULL AND "prior_orders" IS NOT NULL AND "zone" IS NOT NULL AND "say ""hi""" IS NOT NULL OFFSET 0
  ) AS rows_
GROUP BY
  k0 ORDER BY k0
