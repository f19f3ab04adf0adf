SELECT
  k0,
  f,
  COUNT(*) AS n,
  SUM(t) AS n1,
  SUM((t - p0)) AS m0_u0,
  SUM((t - p0) * v0) AS m0_u1,
  SUM((t - p0) * v1) AS m0_u2,
  SUM((t - p1)) AS m1_u0,
  SUM((t - p1) * v0) AS m1_u1,
  SUM((t - p1) * v1) AS m1_u2
FROM
  (
    SELECT
      *,
      CASE
        WHEN eta0 >= 0 THEN
          1.0 / (1.0 + EXP(-eta0))
        ELSE
          EXP(eta0) / (1.0 + EXP(eta0))
      END AS p0,
      CASE
        WHEN eta1 >= 0 THEN
          1.0 / (1.0 + EXP(-eta1))
        ELSE
          EXP(eta1) / (1.0 + EXP(eta1))
      END AS p1
    FROM
      (
        SELECT
          *,
          CASE
            WHEN k0 = 'new' THEN
              upshot_linear([0.0, 0.5, -0.25], v0, v1)
            WHEN k0 = '1y' THEN
              upshot_linear([0.0, 0.5, -0.25], v0, v1)
          END AS eta0,
          CASE
            WHEN k0 = 'new' THEN
              upshot_linear([1.0, 0.5, -0.25], v0, v1)
            WHEN k0 = '1y' THEN
              upshot_linear([1.0, 0.5, -0.25], v0, v1)
          END AS eta1
        FROM
          (
            SELECT
              "tenure_band" AS k0,
              ((((((((CAST("customer_id" % 2147483647 AS BIGINT) + 2147483647) % 2147483647) * 48271 + 11) % 2147483647) * ((((CAST("customer_id" % 2147483647 AS BIGINT) + 2147483647) % 2147483647) * 48271 + 11) % 2147483647)) % 2147483647) * 16807 + ((((CAST("customer_id" % 2147483647 AS BIGINT) + 2147483647) % 2147483647) * 48271 + 11) % 2147483647)) % 2147483647) % 2 AS f,
              (CAST("prior orders" AS DOUBLE) - 2.5) / 1.5 AS v0,
              (((CAST("prior orders" AS DOUBLE) - 2.5) / 1.5) * ((CAST("prior orders" AS DOUBLE) - 2.5) / 1.5) - 1.0) / 1.0 AS v1,
              CAST("voucher" AS DOUBLE) AS t,
              CAST("spend_30d" AS DOUBLE) AS y
            FROM
              "customers" AS src
            WHERE
              true AND "tenure_band" IS NOT NULL AND "prior orders" IS NOT NULL AND "voucher" IS NOT NULL AND "spend_30d" IS NOT NULL AND "customer_id" IS NOT NULL
          ) AS rows_
      ) AS linear_
  ) AS fitted_
GROUP BY
  k0, f ORDER BY k0, f
