SELECT
  k0,
  COUNT(*) AS n,
  SUM(rt * rt) AS stt,
  SUM(rt * ry) AS sty,
  SUM(rt * rt * ry * ry) AS s22,
  SUM(rt * rt * rt * ry) AS s31,
  SUM(rt * rt * rt * rt) AS s40
FROM
  (
    SELECT
      *,
      t - (CASE WHEN k0 = 'new' THEN CASE WHEN f = 0 THEN 0.3 + 0.5 * v0 + -0.25 * v1 WHEN f = 1 THEN 1.3 + 0.5 * v0 + -0.25 * v1 END WHEN k0 = '1y' THEN CASE WHEN f = 0 THEN 0.3 + 0.5 * v0 + -0.25 * v1 WHEN f = 1 THEN 1.3 + 0.5 * v0 + -0.25 * v1 END END) AS rt,
      y - (CASE WHEN k0 = 'new' THEN CASE WHEN f = 0 THEN 60.0 + 0.5 * v0 + -0.25 * v1 WHEN f = 1 THEN 61.0 + 0.5 * v0 + -0.25 * v1 END WHEN k0 = '1y' THEN CASE WHEN f = 0 THEN 60.0 + 0.5 * v0 + -0.25 * v1 WHEN f = 1 THEN 61.0 + 0.5 * v0 + -0.25 * v1 END END) AS ry
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
  ) AS residuals_
GROUP BY
  k0 ORDER BY k0
