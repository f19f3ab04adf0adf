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
          mt0_p1c0 + mt0_p1c1 * v0 + mt0_p1c2 * v1 AS m1,
          mt0_p2c0 + mt0_p2c1 * v0 + mt0_p2c2 * v1 AS m0
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
                  mt0_p0c0 + mt0_p0c1 * v0 + mt0_p0c2 * v1 AS eta
                FROM
                  (
                    SELECT
                      "tenure_band" AS k0,
                      ((((((((CAST("customer_id" % 2147483647 AS BIGINT) + 2147483647) % 2147483647) * 48271 + 11) % 2147483647) * ((((CAST("customer_id" % 2147483647 AS BIGINT) + 2147483647) % 2147483647) * 48271 + 11) % 2147483647)) % 2147483647) * 16807 + ((((CAST("customer_id" % 2147483647 AS BIGINT) + 2147483647) % 2147483647) * 48271 + 11) % 2147483647)) % 2147483647) % 2 AS f,
                      (CAST("prior orders" AS DOUBLE) - 2.5) / 1.5 AS v0,
                      (((CAST("prior orders" AS DOUBLE) - 2.5) / 1.5) * ((CAST("prior orders" AS DOUBLE) - 2.5) / 1.5) - 1.0) / 1.0 AS v1,
                      CAST("voucher" AS DOUBLE) AS t,
                      CAST("spend_30d" AS DOUBLE) AS y
                    FROM
                      "customers" AS src
                    WHERE
                      true AND "tenure_band" IS NOT NULL AND "prior orders" IS NOT NULL AND "voucher" IS NOT NULL AND "spend_30d" IS NOT NULL AND "customer_id" IS NOT NULL
                  ) AS rows_
                  LEFT JOIN (VALUES ('band0', 0, CAST(0.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.0 AS DOUBLE), CAST(50.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.0 AS DOUBLE), CAST(40.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.0 AS DOUBLE)), ('band0', 1, CAST(0.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.25 AS DOUBLE), CAST(50.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.25 AS DOUBLE), CAST(40.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.25 AS DOUBLE)), ('band1', 0, CAST(1.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.0 AS DOUBLE), CAST(51.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.0 AS DOUBLE), CAST(41.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.0 AS DOUBLE)), ('band1', 1, CAST(1.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.25 AS DOUBLE), CAST(51.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.25 AS DOUBLE), CAST(41.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.25 AS DOUBLE)), ('band2', 0, CAST(2.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.0 AS DOUBLE), CAST(52.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.0 AS DOUBLE), CAST(42.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.0 AS DOUBLE)), ('band2', 1, CAST(2.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.25 AS DOUBLE), CAST(52.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.25 AS DOUBLE), CAST(42.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.25 AS DOUBLE)), ('band3', 0, CAST(3.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.0 AS DOUBLE), CAST(53.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.0 AS DOUBLE), CAST(43.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.0 AS DOUBLE)), ('band3', 1, CAST(3.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.25 AS DOUBLE), CAST(53.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.25 AS DOUBLE), CAST(43.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.25 AS DOUBLE)), ('band4', 0, CAST(4.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.0 AS DOUBLE), CAST(54.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.0 AS DOUBLE), CAST(44.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.0 AS DOUBLE)), ('band4', 1, CAST(4.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.25 AS DOUBLE), CAST(54.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.25 AS DOUBLE), CAST(44.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.25 AS DOUBLE)), ('band5', 0, CAST(5.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.0 AS DOUBLE), CAST(55.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.0 AS DOUBLE), CAST(45.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.0 AS DOUBLE)), ('band5', 1, CAST(5.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.25 AS DOUBLE), CAST(55.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.25 AS DOUBLE), CAST(45.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.25 AS DOUBLE)), ('band6', 0, CAST(6.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.0 AS DOUBLE), CAST(56.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.0 AS DOUBLE), CAST(46.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.0 AS DOUBLE)), ('band6', 1, CAST(6.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.25 AS DOUBLE), CAST(56.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.25 AS DOUBLE), CAST(46.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.25 AS DOUBLE)), ('band7', 0, CAST(7.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.0 AS DOUBLE), CAST(57.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.0 AS DOUBLE), CAST(47.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.0 AS DOUBLE)), ('band7', 1, CAST(7.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.25 AS DOUBLE), CAST(57.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.25 AS DOUBLE), CAST(47.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.25 AS DOUBLE)), ('band8', 0, CAST(8.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.0 AS DOUBLE), CAST(58.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.0 AS DOUBLE), CAST(48.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.0 AS DOUBLE)), ('band8', 1, CAST(8.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.25 AS DOUBLE), CAST(58.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.25 AS DOUBLE), CAST(48.0 AS DOUBLE), CAST(0.5 AS DOUBLE), CAST(-0.25 AS DOUBLE))) AS mt0_ (mt0_j0, mt0_j1, mt0_p0c0, mt0_p0c1, mt0_p0c2, mt0_p1c0, mt0_p1c1, mt0_p1c2, mt0_p2c0, mt0_p2c1, mt0_p2c2) ON k0 = mt0_j0 AND f = mt0_j1
              ) AS linear_
          ) AS raw_
      ) AS nuisance_
  ) AS scores_
GROUP BY
  k0 ORDER BY k0
