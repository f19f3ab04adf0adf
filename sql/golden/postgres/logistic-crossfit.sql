SELECT
  k0,
  f,
  COUNT(*) AS n,
  SUM(t) AS n1,
  SUM((t - p0)) AS m0_u0,
  SUM((t - p0) * v0) AS m0_u1,
  SUM((t - p0) * v1) AS m0_u2,
  SUM(p0 * (1.0 - p0)) AS m0_h0_0,
  SUM(p0 * (1.0 - p0) * v0) AS m0_h0_1,
  SUM(p0 * (1.0 - p0) * v1) AS m0_h0_2,
  SUM(p0 * (1.0 - p0) * v0 * v0) AS m0_h1_1,
  SUM(p0 * (1.0 - p0) * v0 * v1) AS m0_h1_2,
  SUM(p0 * (1.0 - p0) * v1 * v1) AS m0_h2_2,
  SUM(t * eta0 - CASE WHEN eta0 > 0 THEN eta0 + LN(1.0 + EXP(-eta0)) ELSE LN(1.0 + EXP(eta0)) END) AS m0_loglik,
  MIN(p0) AS m0_min_p,
  MAX(p0) AS m0_max_p,
  SUM((t - p1)) AS m1_u0,
  SUM((t - p1) * v0) AS m1_u1,
  SUM((t - p1) * v1) AS m1_u2,
  SUM(p1 * (1.0 - p1)) AS m1_h0_0,
  SUM(p1 * (1.0 - p1) * v0) AS m1_h0_1,
  SUM(p1 * (1.0 - p1) * v1) AS m1_h0_2,
  SUM(p1 * (1.0 - p1) * v0 * v0) AS m1_h1_1,
  SUM(p1 * (1.0 - p1) * v0 * v1) AS m1_h1_2,
  SUM(p1 * (1.0 - p1) * v1 * v1) AS m1_h2_2,
  SUM(t * eta1 - CASE WHEN eta1 > 0 THEN eta1 + LN(1.0 + EXP(-eta1)) ELSE LN(1.0 + EXP(eta1)) END) AS m1_loglik,
  MIN(p1) AS m1_min_p,
  MAX(p1) AS m1_max_p
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
              0.0 + 0.5 * v0 + -0.25 * v1
            WHEN k0 = '1y' THEN
              0.0 + 0.5 * v0 + -0.25 * v1
          END AS eta0,
          CASE
            WHEN k0 = 'new' THEN
              1.0 + 0.5 * v0 + -0.25 * v1
            WHEN k0 = '1y' THEN
              1.0 + 0.5 * v0 + -0.25 * v1
          END AS eta1
        FROM
          (
            SELECT
              "tenure_band" AS k0,
              ((((((((CAST("customer_id" % 2147483647 AS BIGINT) + 2147483647) % 2147483647) * 48271 + 11) % 2147483647) * ((((CAST("customer_id" % 2147483647 AS BIGINT) + 2147483647) % 2147483647) * 48271 + 11) % 2147483647)) % 2147483647) * 16807 + ((((CAST("customer_id" % 2147483647 AS BIGINT) + 2147483647) % 2147483647) * 48271 + 11) % 2147483647)) % 2147483647) % 2 AS f,
              (CAST("prior orders" AS DOUBLE PRECISION) - 2.5) / 1.5 AS v0,
              (((CAST("prior orders" AS DOUBLE PRECISION) - 2.5) / 1.5) * ((CAST("prior orders" AS DOUBLE PRECISION) - 2.5) / 1.5) - 1.0) / 1.0 AS v1,
              CAST("voucher" AS DOUBLE PRECISION) AS t,
              CAST("spend_30d" AS DOUBLE PRECISION) AS y
            FROM
              "customers" AS src
            WHERE
              true AND "tenure_band" IS NOT NULL AND "prior orders" IS NOT NULL AND "voucher" IS NOT NULL AND "spend_30d" IS NOT NULL AND "customer_id" IS NOT NULL OFFSET 0
          ) AS rows_ OFFSET 0
      ) AS linear_ OFFSET 0
  ) AS fitted_
GROUP BY
  k0, f ORDER BY k0, f
