SELECT
  k0,
  n,
  list_extract(moments0, 2) AS s0,
  list_extract(moments0, 3) AS s1,
  list_extract(moments0, 4) AS s2,
  list_extract(moments0, 5) AS g0_0,
  list_extract(moments0, 6) AS g0_1,
  list_extract(moments0, 7) AS g0_2,
  list_extract(moments0, 8) AS g1_1,
  list_extract(moments0, 9) AS g1_2,
  list_extract(moments0, 10) AS g2_2
FROM
  (
    SELECT
      k0,
      COUNT(*) AS n,
      upshot_moments(1.0, v0, v1, v2) AS moments0
    FROM
      (
        SELECT
          "voucher" AS k0,
          (CAST("prior_orders" AS DOUBLE) - 2.65) / 1.7 AS v0,
          (CASE WHEN CAST("zone" AS VARCHAR) = 'Old Town' THEN 1.0 ELSE 0.0 END - 0.17) / 0.375 AS v1,
          (CAST("say ""hi""" AS DOUBLE) - -1e-7) / 3.0 AS v2
        FROM
          "main"."order lines" AS src
        WHERE
          ("zone" <> 'Old Town' AND prior_orders >= 0) AND "voucher" IS NOT NULL AND "prior_orders" IS NOT NULL AND "zone" IS NOT NULL AND "say ""hi""" IS NOT NULL
      ) AS rows_
    GROUP BY
      k0
  ) AS sums_ ORDER BY k0
