SELECT
  k0,
  f,
  n,
  n1,
  m0_u0,
  m0_u1,
  m0_u2,
  list_extract(moments0, 1) AS m0_h0_0,
  list_extract(moments0, 2) AS m0_h0_1,
  list_extract(moments0, 3) AS m0_h0_2,
  list_extract(moments0, 4) AS m0_h1_1,
  list_extract(moments0, 5) AS m0_h1_2,
  list_extract(moments0, 6) AS m0_h2_2,
  m0_loglik,
  m0_min_p,
  m0_max_p,
  m1_u0,
  m1_u1,
  m1_u2,
  list_extract(moments1, 1) AS m1_h0_0,
  list_extract(moments1, 2) AS m1_h0_1,
  list_extract(moments1, 3) AS m1_h0_2,
  list_extract(moments1, 4) AS m1_h1_1,
  list_extract(moments1, 5) AS m1_h1_2,
  list_extract(moments1, 6) AS m1_h2_2,
  m1_loglik,
  m1_min_p,
  m1_max_p
FROM
  (
    SELECT
      k0,
      f,
      COUNT(*) AS n,
      SUM(t) AS n1,
      SUM((t - p0)) AS m0_u0,
      SUM((t - p0) * v0) AS m0_u1,
      SUM((t - p0) * v1) AS m0_u2,
      upshot_moments(p0 * (1.0 - p0), v0, v1) AS moments0,
      SUM(t * eta0 - CASE WHEN eta0 > 0 THEN eta0 + LN(1.0 + EXP(-eta0)) ELSE LN(1.0 + EXP(eta0)) END) AS m0_loglik,
      MIN(p0) AS m0_min_p,
      MAX(p0) AS m0_max_p,
      SUM((t - p1)) AS m1_u0,
      SUM((t - p1) * v0) AS m1_u1,
      SUM((t - p1) * v1) AS m1_u2,
      upshot_moments(p1 * (1.0 - p1), v0, v1) AS moments1,
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
      k0, f
  ) AS sums_ ORDER BY k0, f
