SELECT
  k0,
  n,
  list_extract(moments0, 1) AS r0_0,
  list_extract(moments0, 2) AS r0_1,
  list_extract(moments0, 3) AS r1_1
FROM
  (
    SELECT
      k0,
      COUNT(*) AS n,
      upshot_moments(e * e, v0) AS moments0
    FROM
      (
        SELECT
          *,
          y - (upshot_linear([80.5, 8.0], v0)) AS e
        FROM
          (
            SELECT
              "tenure_band" AS k0,
              (CAST("app_sessions" AS DOUBLE) - 3.5) / 2.0 AS v0,
              CAST("spend_30d" AS DOUBLE) AS y
            FROM
              "main"."order lines" AS src
            WHERE
              true AND "tenure_band" IS NOT NULL AND "app_sessions" IS NOT NULL AND "spend_30d" IS NOT NULL
          ) AS rows_
      ) AS residuals_
    GROUP BY
      k0
  ) AS sums_ ORDER BY k0
