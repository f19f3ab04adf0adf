SELECT
  k0,
  COUNT(*) AS n,
  SUM(e * e) AS r0_0,
  SUM(e * e * v0) AS r0_1,
  SUM(e * e * v0 * v0) AS r1_1
FROM
  (
    SELECT
      *,
      y - (80.5 + 8.0 * v0) AS e
    FROM
      (
        SELECT
          "tenure_band" AS k0,
          (CAST("app_sessions" AS DOUBLE PRECISION) - 3.5) / 2.0 AS v0,
          CAST("spend_30d" AS DOUBLE PRECISION) AS y
        FROM
          "main"."order lines" AS src
        WHERE
          true AND "tenure_band" IS NOT NULL AND "app_sessions" IS NOT NULL AND "spend_30d" IS NOT NULL OFFSET 0
      ) AS rows_ OFFSET 0
  ) AS residuals_
GROUP BY
  k0 ORDER BY k0
