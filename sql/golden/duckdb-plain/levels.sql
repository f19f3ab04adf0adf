SELECT
  which,
  level,
  n
FROM
  (
    SELECT
      0 AS which,
      CAST("zone" AS VARCHAR) AS level,
      COUNT(*) AS n
    FROM
      "customers" AS src
    WHERE
      true AND "zone" IS NOT NULL AND "mail wave" IS NOT NULL AND "voucher" IS NOT NULL
    GROUP BY
      "zone"
    UNION ALL
    SELECT
      1 AS which,
      CAST("mail wave" AS VARCHAR) AS level,
      COUNT(*) AS n
    FROM
      "customers" AS src
    WHERE
      true AND "zone" IS NOT NULL AND "mail wave" IS NOT NULL AND "voucher" IS NOT NULL
    GROUP BY
      "mail wave"
  ) AS levels_ ORDER BY which, level
