SELECT
  k0,
  COUNT(*) AS n,
  SUM(t) AS n1,
  SUM(t * w1) AS a1,
  SUM(t * w1 * y) AS b1,
  SUM(t * w1 * w1) AS q1,
  SUM(t * w1 * w1 * y) AS q1y,
  SUM(t * w1 * w1 * y * y) AS q1yy,
  SUM((1.0 - t) * w0) AS a0,
  SUM((1.0 - t) * w0 * y) AS b0,
  SUM((1.0 - t) * w0 * w0) AS q0,
  SUM((1.0 - t) * w0 * w0 * y) AS q0y,
  SUM((1.0 - t) * w0 * w0 * y * y) AS q0yy,
  SUM(t * (1.0 - inside)) AS clipped1,
  SUM((1.0 - t) * (1.0 - inside)) AS clipped0,
  MIN(e_raw) AS min_e,
  MAX(e_raw) AS max_e,
  SUM(t * w1d) AS d1_0,
  SUM(t * w1d * y) AS d1y_0,
  SUM((1.0 - t) * w0d) AS d0_0,
  SUM((1.0 - t) * w0d * y) AS d0y_0,
  SUM(t * w1 * (1.0 - e_raw)) AS c1_0,
  SUM(t * w1 * (1.0 - e_raw) * y) AS c1y_0,
  SUM((1.0 - t) * w0 * e_raw) AS c0_0,
  SUM((1.0 - t) * w0 * e_raw * y) AS c0y_0,
  SUM(t * w1d * v0) AS d1_1,
  SUM(t * w1d * y * v0) AS d1y_1,
  SUM((1.0 - t) * w0d * v0) AS d0_1,
  SUM((1.0 - t) * w0d * y * v0) AS d0y_1,
  SUM(t * w1 * (1.0 - e_raw) * v0) AS c1_1,
  SUM(t * w1 * (1.0 - e_raw) * y * v0) AS c1y_1,
  SUM((1.0 - t) * w0 * e_raw * v0) AS c0_1,
  SUM((1.0 - t) * w0 * e_raw * y * v0) AS c0y_1,
  SUM(t * w1d * v1) AS d1_2,
  SUM(t * w1d * y * v1) AS d1y_2,
  SUM((1.0 - t) * w0d * v1) AS d0_2,
  SUM((1.0 - t) * w0d * y * v1) AS d0y_2,
  SUM(t * w1 * (1.0 - e_raw) * v1) AS c1_2,
  SUM(t * w1 * (1.0 - e_raw) * y * v1) AS c1y_2,
  SUM((1.0 - t) * w0 * e_raw * v1) AS c0_2,
  SUM((1.0 - t) * w0 * e_raw * y * v1) AS c0y_2,
  SUM((t - e_raw) * (t - e_raw)) AS s0_0,
  SUM((t - e_raw) * (t - e_raw) * v0) AS s0_1,
  SUM((t - e_raw) * (t - e_raw) * v1) AS s0_2,
  SUM((t - e_raw) * (t - e_raw) * v0 * v0) AS s1_1,
  SUM((t - e_raw) * (t - e_raw) * v0 * v1) AS s1_2,
  SUM((t - e_raw) * (t - e_raw) * v1 * v1) AS s2_2,
  SUM(e_raw * (1.0 - e_raw)) AS h0_0,
  SUM(e_raw * (1.0 - e_raw) * v0) AS h0_1,
  SUM(e_raw * (1.0 - e_raw) * v1) AS h0_2,
  SUM(e_raw * (1.0 - e_raw) * v0 * v0) AS h1_1,
  SUM(e_raw * (1.0 - e_raw) * v0 * v1) AS h1_2,
  SUM(e_raw * (1.0 - e_raw) * v1 * v1) AS h2_2
FROM
  (
    SELECT
      *,
      1.0 / e AS w1,
      -(1.0 - e) / e * inside AS w1d,
      1.0 / (1.0 - e) AS w0,
      e / (1.0 - e) * inside AS w0d
    FROM
      (
        SELECT
          *,
          CASE
            WHEN e_raw < 0.01E0 THEN
              0.01E0
            WHEN e_raw > 0.99E0 THEN
              0.99E0
            ELSE
              e_raw
          END AS e,
          CASE
            WHEN e_raw < 0.01E0 OR e_raw > 0.99E0 THEN
              0.0
            ELSE
              1.0
          END AS inside
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
                  0.1E0 + 0.2E0 * v0 + 0.3E0 * v1 AS eta
                FROM
                  (
                    SELECT
                      `tenure_band` AS k0,
                      (CAST(`prior orders` AS DOUBLE) - 2.5E0) / 1.5E0 AS v0,
                      (((CAST(`prior orders` AS DOUBLE) - 2.5E0) / 1.5E0) * ((CAST(`prior orders` AS DOUBLE) - 2.5E0) / 1.5E0) - 1.0E0) / 1.0E0 AS v1,
                      CAST(`voucher` AS DOUBLE) AS t,
                      CAST(`spend_30d` AS DOUBLE) AS y
                    FROM
                      `customers` AS src
                    WHERE
                      true AND `tenure_band` IS NOT NULL AND `prior orders` IS NOT NULL AND `voucher` IS NOT NULL AND `spend_30d` IS NOT NULL
                  ) AS rows_
              ) AS linear_
          ) AS raw_
      ) AS propensity_
  ) AS weighted_
GROUP BY
  k0 ORDER BY k0
