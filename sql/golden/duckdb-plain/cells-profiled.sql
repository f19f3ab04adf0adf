SELECT
  "mail wave" AS k0,
  "zone" AS k1,
  "voucher" AS k2,
  COUNT(*) AS n_rows,
  COUNT("spend 30d") AS n,
  SUM(CAST("spend 30d" AS DOUBLE)) AS sy,
  SUM(CAST("spend 30d" AS DOUBLE) * CAST("spend 30d" AS DOUBLE)) AS syy,
  MIN("spend 30d") AS y_min,
  MAX("spend 30d") AS y_max
FROM
  "main"."order lines" AS src
WHERE
  ("zone" <> 'Old Town' AND prior_orders >= 0)
GROUP BY
  "mail wave", "zone", "voucher" ORDER BY 1, 2, 3 LIMIT 200001
