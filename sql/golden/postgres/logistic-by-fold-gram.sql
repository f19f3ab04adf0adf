SELECT
  k0,
  f,
  t,
  COUNT(*) AS n,
  SUM(t) AS n1,
  SUM((t - p)) AS u0,
  SUM((t - p) * v0) AS u1,
  SUM((t - p) * v1) AS u2,
  SUM(p * (1.0 - p)) AS h0_0,
  SUM(p * (1.0 - p) * v0) AS h0_1,
  SUM(p * (1.0 - p) * v1) AS h0_2,
  SUM(p * (1.0 - p) * v0 * v0) AS h1_1,
  SUM(p * (1.0 - p) * v0 * v1) AS h1_2,
  SUM(p * (1.0 - p) * v1 * v1) AS h2_2,
  SUM(t * eta - CASE WHEN eta > 0 THEN eta + LN(1.0 + EXP(-eta)) ELSE LN(1.0 + EXP(eta)) END) AS loglik,
  MIN(p) AS min_p,
  MAX(p) AS max_p,
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
      *,
      CASE
        WHEN eta >= 0 THEN
          1.0 / (1.0 + EXP(-eta))
        ELSE
          EXP(eta) / (1.0 + EXP(eta))
      END AS p
    FROM
      (
        SELECT
          *,
          0.1 + 0.2 * v0 + 0.3 * v1 AS eta
        FROM
          (
            SELECT
              "tenure_band" AS k0,
              ((((((((CAST("customer_id" % 2147483647 AS BIGINT) + 2147483647) % 2147483647) * 48271 + 11) % 2147483647) * ((((CAST("customer_id" % 2147483647 AS BIGINT) + 2147483647) % 2147483647) * 48271 + 11) % 2147483647)) % 2147483647) * 16807 + ((((CAST("customer_id" % 2147483647 AS BIGINT) + 2147483647) % 2147483647) * 48271 + 11) % 2147483647)) % 2147483647) % 2 AS f,
              (CAST("prior orders" AS DOUBLE PRECISION) - 2.5) / 1.5 AS v0,
              (((CAST("prior orders" AS DOUBLE PRECISION) - 2.5) / 1.5) * ((CAST("prior orders" AS DOUBLE PRECISION) - 2.5) / 1.5) - 1.0) / 1.0 AS v1,
              (CAST("spend_30d" AS DOUBLE PRECISION) - 40.0) / 12.0 AS v2,
              CAST("voucher" AS DOUBLE PRECISION) AS t,
              CAST("spend_30d" AS DOUBLE PRECISION) AS y
            FROM
              "customers" AS src
            WHERE
              true AND "tenure_band" IS NOT NULL AND "prior orders" IS NOT NULL AND "spend_30d" IS NOT NULL AND "voucher" IS NOT NULL AND "customer_id" IS NOT NULL OFFSET 0
          ) AS rows_ OFFSET 0
      ) AS linear_ OFFSET 0
  ) AS fitted_
GROUP BY
  k0, f, t ORDER BY k0, f, t
