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
      t - (CASE WHEN k0 = 'new' THEN CASE WHEN f = 0 THEN 0.3E0 + 0.5E0 * v0 + -0.25E0 * v1 WHEN f = 1 THEN 1.3E0 + 0.5E0 * v0 + -0.25E0 * v1 END WHEN k0 = '1y' THEN CASE WHEN f = 0 THEN 0.3E0 + 0.5E0 * v0 + -0.25E0 * v1 WHEN f = 1 THEN 1.3E0 + 0.5E0 * v0 + -0.25E0 * v1 END END) AS rt,
      y - (CASE WHEN k0 = 'new' THEN CASE WHEN f = 0 THEN 60.0E0 + 0.5E0 * v0 + -0.25E0 * v1 WHEN f = 1 THEN 61.0E0 + 0.5E0 * v0 + -0.25E0 * v1 END WHEN k0 = '1y' THEN CASE WHEN f = 0 THEN 60.0E0 + 0.5E0 * v0 + -0.25E0 * v1 WHEN f = 1 THEN 61.0E0 + 0.5E0 * v0 + -0.25E0 * v1 END END) AS ry
    FROM
      (
        SELECT
          `tenure_band` AS k0,
          ((((((((CAST(`customer_id` % 2147483647 AS BIGINT) + 2147483647) % 2147483647) * 48271 + 11) % 2147483647) * ((((CAST(`customer_id` % 2147483647 AS BIGINT) + 2147483647) % 2147483647) * 48271 + 11) % 2147483647)) % 2147483647) * 16807 + ((((CAST(`customer_id` % 2147483647 AS BIGINT) + 2147483647) % 2147483647) * 48271 + 11) % 2147483647)) % 2147483647) % 2 AS f,
          (CAST(`prior orders` AS DOUBLE) - 2.5E0) / 1.5E0 AS v0,
          (((CAST(`prior orders` AS DOUBLE) - 2.5E0) / 1.5E0) * ((CAST(`prior orders` AS DOUBLE) - 2.5E0) / 1.5E0) - 1.0E0) / 1.0E0 AS v1,
          CAST(`voucher` AS DOUBLE) AS t,
          CAST(`spend_30d` AS DOUBLE) AS y
        FROM
          `customers` AS src
        WHERE
          true AND `tenure_band` IS NOT NULL AND `prior orders` IS NOT NULL AND `voucher` IS NOT NULL AND `spend_30d` IS NOT NULL AND `customer_id` IS NOT NULL
      ) AS rows_
  ) AS residuals_
GROUP BY
  k0 ORDER BY k0
