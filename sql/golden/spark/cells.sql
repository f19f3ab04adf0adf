SELECT
  `tenure_band` AS k0,
  `voucher` AS k1,
  COUNT(*) AS n,
  SUM(CAST(`spend_30d` AS DOUBLE)) AS sy,
  SUM(CAST(`spend_30d` AS DOUBLE) * CAST(`spend_30d` AS DOUBLE)) AS syy
FROM
  (
    SELECT
      *
    FROM
      customers
    WHERE
      voucher IN (0, 1)
  ) AS src
WHERE
  true AND `tenure_band` IS NOT NULL AND `voucher` IS NOT NULL AND `spend_30d` IS NOT NULL
GROUP BY
  `tenure_band`, `voucher` ORDER BY 1, 2
