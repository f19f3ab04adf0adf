SELECT
  k0,
  COUNT(*) AS n,
  SUM(t) AS n1,
  SUM(num) AS sn,
  SUM(num * num) AS snn,
  SUM(den * num) AS sdn,
  SUM(den) AS sd,
  SUM(t * (1.0 - inside)) AS clipped1,
  SUM((1.0 - t) * (1.0 - inside)) AS clipped0,
  MIN(e_raw) AS min_e,
  MAX(e_raw) AS max_e
FROM
  (
    SELECT
      *,
      m1 - m0 + t * (y - m1) / e - (1.0 - t) * (y - m0) / (1.0 - e) AS num,
      1.0 AS den
    FROM
      (
        SELECT
          *,
          CASE
            WHEN e_raw < 0.01 THEN
              0.01
            WHEN e_raw > 0.99 THEN
              0.99
            ELSE
              e_raw
          END AS e,
          CASE
            WHEN e_raw < 0.01 OR e_raw > 0.99 THEN
              0.0
            ELSE
              1.0
          END AS inside,
          CASE
            WHEN k0 = 'band0' THEN
              CASE
                WHEN f = 0 THEN
                  50.0 + 0.5 * v0 + -0.0 * v1
                WHEN f = 1 THEN
                  50.0 + 0.5 * v0 + -0.25 * v1
              END
            WHEN k0 = 'band1' THEN
              CASE
                WHEN f = 0 THEN
                  51.0 + 0.5 * v0 + -0.0 * v1
                WHEN f = 1 THEN
                  51.0 + 0.5 * v0 + -0.25 * v1
              END
            WHEN k0 = 'band2' THEN
              CASE
                WHEN f = 0 THEN
                  52.0 + 0.5 * v0 + -0.0 * v1
                WHEN f = 1 THEN
                  52.0 + 0.5 * v0 + -0.25 * v1
              END
            WHEN k0 = 'band3' THEN
              CASE
                WHEN f = 0 THEN
                  53.0 + 0.5 * v0 + -0.0 * v1
                WHEN f = 1 THEN
                  53.0 + 0.5 * v0 + -0.25 * v1
              END
            WHEN k0 = 'band4' THEN
              CASE
                WHEN f = 0 THEN
                  54.0 + 0.5 * v0 + -0.0 * v1
                WHEN f = 1 THEN
                  54.0 + 0.5 * v0 + -0.25 * v1
              END
            WHEN k0 = 'band5' THEN
              CASE
                WHEN f = 0 THEN
                  55.0 + 0.5 * v0 + -0.0 * v1
                WHEN f = 1 THEN
                  55.0 + 0.5 * v0 + -0.25 * v1
              END
            WHEN k0 = 'band6' THEN
              CASE
                WHEN f = 0 THEN
                  56.0 + 0.5 * v0 + -0.0 * v1
                WHEN f = 1 THEN
                  56.0 + 0.5 * v0 + -0.25 * v1
              END
            WHEN k0 = 'band7' THEN
              CASE
                WHEN f = 0 THEN
                  57.0 + 0.5 * v0 + -0.0 * v1
                WHEN f = 1 THEN
                  57.0 + 0.5 * v0 + -0.25 * v1
              END
            WHEN k0 = 'band8' THEN
              CASE
                WHEN f = 0 THEN
                  58.0 + 0.5 * v0 + -0.0 * v1
                WHEN f = 1 THEN
                  58.0 + 0.5 * v0 + -0.25 * v1
              END
          END AS m1,
          CASE
            WHEN k0 = 'band0' THEN
              CASE
                WHEN f = 0 THEN
                  40.0 + 0.5 * v0 + -0.0 * v1
                WHEN f = 1 THEN
                  40.0 + 0.5 * v0 + -0.25 * v1
              END
            WHEN k0 = 'band1' THEN
              CASE
                WHEN f = 0 THEN
                  41.0 + 0.5 * v0 + -0.0 * v1
                WHEN f = 1 THEN
                  41.0 + 0.5 * v0 + -0.25 * v1
              END
            WHEN k0 = 'band2' THEN
              CASE
                WHEN f = 0 THEN
                  42.0 + 0.5 * v0 + -0.0 * v1
                WHEN f = 1 THEN
                  42.0 + 0.5 * v0 + -0.25 * v1
              END
            WHEN k0 = 'band3' THEN
              CASE
                WHEN f = 0 THEN
                  43.0 + 0.5 * v0 + -0.0 * v1
                WHEN f = 1 THEN
                  43.0 + 0.5 * v0 + -0.25 * v1
              END
            WHEN k0 = 'band4' THEN
              CASE
                WHEN f = 0 THEN
                  44.0 + 0.5 * v0 + -0.0 * v1
                WHEN f = 1 THEN
                  44.0 + 0.5 * v0 + -0.25 * v1
              END
            WHEN k0 = 'band5' THEN
              CASE
                WHEN f = 0 THEN
                  45.0 + 0.5 * v0 + -0.0 * v1
                WHEN f = 1 THEN
                  45.0 + 0.5 * v0 + -0.25 * v1
              END
            WHEN k0 = 'band6' THEN
              CASE
                WHEN f = 0 THEN
                  46.0 + 0.5 * v0 + -0.0 * v1
                WHEN f = 1 THEN
                  46.0 + 0.5 * v0 + -0.25 * v1
              END
            WHEN k0 = 'band7' THEN
              CASE
                WHEN f = 0 THEN
                  47.0 + 0.5 * v0 + -0.0 * v1
                WHEN f = 1 THEN
                  47.0 + 0.5 * v0 + -0.25 * v1
              END
            WHEN k0 = 'band8' THEN
              CASE
                WHEN f = 0 THEN
                  48.0 + 0.5 * v0 + -0.0 * v1
                WHEN f = 1 THEN
                  48.0 + 0.5 * v0 + -0.25 * v1
              END
          END AS m0
        FROM
          (
            SELECT
              *,
              CASE
                WHEN eta >= 0 THEN
                  1.0 / (1.0 + EXP(-eta))
                ELSE
                  EXP(eta) / (1.0 + EXP(eta))
              END AS e_raw
            FROM
              (
                SELECT
                  *,
                  CASE
                    WHEN k0 = 'band0' THEN
                      CASE
                        WHEN f = 0 THEN
                          0.0 + 0.5 * v0 + -0.0 * v1
                        WHEN f = 1 THEN
                          0.0 + 0.5 * v0 + -0.25 * v1
                      END
                    WHEN k0 = 'band1' THEN
                      CASE
                        WHEN f = 0 THEN
                          1.0 + 0.5 * v0 + -0.0 * v1
                        WHEN f = 1 THEN
                          1.0 + 0.5 * v0 + -0.25 * v1
                      END
                    WHEN k0 = 'band2' THEN
                      CASE
                        WHEN f = 0 THEN
                          2.0 + 0.5 * v0 + -0.0 * v1
                        WHEN f = 1 THEN
                          2.0 + 0.5 * v0 + -0.25 * v1
                      END
                    WHEN k0 = 'band3' THEN
                      CASE
                        WHEN f = 0 THEN
                          3.0 + 0.5 * v0 + -0.0 * v1
                        WHEN f = 1 THEN
                          3.0 + 0.5 * v0 + -0.25 * v1
                      END
                    WHEN k0 = 'band4' THEN
                      CASE
                        WHEN f = 0 THEN
                          4.0 + 0.5 * v0 + -0.0 * v1
                        WHEN f = 1 THEN
                          4.0 + 0.5 * v0 + -0.25 * v1
                      END
                    WHEN k0 = 'band5' THEN
                      CASE
                        WHEN f = 0 THEN
                          5.0 + 0.5 * v0 + -0.0 * v1
                        WHEN f = 1 THEN
                          5.0 + 0.5 * v0 + -0.25 * v1
                      END
                    WHEN k0 = 'band6' THEN
                      CASE
                        WHEN f = 0 THEN
                          6.0 + 0.5 * v0 + -0.0 * v1
                        WHEN f = 1 THEN
                          6.0 + 0.5 * v0 + -0.25 * v1
                      END
                    WHEN k0 = 'band7' THEN
                      CASE
                        WHEN f = 0 THEN
                          7.0 + 0.5 * v0 + -0.0 * v1
                        WHEN f = 1 THEN
                          7.0 + 0.5 * v0 + -0.25 * v1
                      END
                    WHEN k0 = 'band8' THEN
                      CASE
                        WHEN f = 0 THEN
                          8.0 + 0.5 * v0 + -0.0 * v1
                        WHEN f = 1 THEN
                          8.0 + 0.5 * v0 + -0.25 * v1
                      END
                  END AS eta
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
              ) AS linear_ OFFSET 0
          ) AS raw_ OFFSET 0
      ) AS nuisance_ OFFSET 0
  ) AS scores_
GROUP BY
  k0 ORDER BY k0
