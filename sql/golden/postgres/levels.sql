SELECT
  which,
  level,
  b0,
  n,
  n1
FROM
  (
    SELECT
      0 AS which,
      CAST("zone" AS VARCHAR) AS level,
      CAST("tenure_band" AS VARCHAR) AS b0,
      COUNT(*) AS n,
      SUM(CASE WHEN CAST("voucher" AS DOUBLE PRECISION) = 1 THEN 1 ELSE 0 END) AS n1
    FROM
      "customers" AS src
    WHERE
      true AND "zone" IS NOT NULL AND "mail wave" IS NOT NULL AND "voucher" IS NOT NULL AND "tenure_band" IS NOT NULL
    GROUP BY
      "zone", "tenure_band"
    UNION ALL
    SELECT
      1 AS which,
      CAST("mail wave" AS VARCHAR) AS level,
      CAST("tenure_band" AS VARCHAR) AS b0,
      COUNT(*) AS n,
      SUM(CASE WHEN CAST("voucher" AS DOUBLE PRECISION) = 1 THEN 1 ELSE 0 END) AS n1
    FROM
      "customers" AS src
    WHERE
      true AND "zone" IS NOT NULL AND "mail wave" IS NOT NULL AND "voucher" IS NOT NULL AND "tenure_band" IS NOT NULL
    GROUP BY
      "mail wave", "tenure_band" OFFSET 0
  ) AS levels_ ORDER BY which, level, b0
