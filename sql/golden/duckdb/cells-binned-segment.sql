SELECT
  "prior orders_bin" AS k0,
  "voucher" AS k1,
  COUNT(*) AS n,
  SUM(CAST("spend_30d" AS DOUBLE)) AS sy,
  SUM(CAST("spend_30d" AS DOUBLE) * CAST("spend_30d" AS DOUBLE)) AS syy
FROM
  (
    SELECT
      src.*,
      CASE
        WHEN "prior orders" IS NULL THEN
          NULL
        WHEN CAST("prior orders" AS DOUBLE) < 2.0 THEN
          1
        WHEN CAST("prior orders" AS DOUBLE) < 4.5 THEN
          2
        ELSE
          3
      END AS "prior orders_bin"
    FROM
      "customers" AS src
  ) AS src
WHERE
  true AND "prior orders_bin" IS NOT NULL AND "voucher" IS NOT NULL AND "spend_30d" IS NOT NULL
GROUP BY
  "prior orders_bin", "voucher" ORDER BY 1, 2
