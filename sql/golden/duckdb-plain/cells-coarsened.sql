SELECT
  "tenure_band" AS k0,
  CAST(LEAST(3.0, GREATEST(0.0, FLOOR((CAST("prior orders" AS DOUBLE) - 0.0) / 2.5))) AS BIGINT) AS k1,
  "zone" AS k2,
  "voucher" AS k3,
  COUNT(*) AS n,
  SUM(CAST("spend_30d" AS DOUBLE)) AS sy,
  SUM(CAST("spend_30d" AS DOUBLE) * CAST("spend_30d" AS DOUBLE)) AS syy
FROM
  "customers" AS src
WHERE
  true AND "tenure_band" IS NOT NULL AND "prior orders" IS NOT NULL AND "zone" IS NOT NULL AND "voucher" IS NOT NULL AND "spend_30d" IS NOT NULL
GROUP BY
  "tenure_band", CAST(LEAST(3.0, GREATEST(0.0, FLOOR((CAST("prior orders" AS DOUBLE) - 0.0) / 2.5))) AS BIGINT), "zone", "voucher" ORDER BY 1, 2, 3, 4
