SELECT
  k0,
  n,
  n1,
  a1,
  b1,
  q1,
  q1y,
  q1yy,
  a0,
  b0,
  q0,
  q0y,
  q0yy,
  clipped1,
  clipped0,
  min_e,
  max_e,
  list_extract(moments0, 4) AS d1_0,
  list_extract(moments0, 5) AS d1y_0,
  list_extract(moments0, 6) AS d0_0,
  list_extract(moments0, 7) AS d0y_0,
  list_extract(moments0, 8) AS c1_0,
  list_extract(moments0, 9) AS c1y_0,
  list_extract(moments0, 10) AS c0_0,
  list_extract(moments0, 11) AS c0y_0,
  list_extract(moments0, 14) AS d1_1,
  list_extract(moments0, 15) AS d1y_1,
  list_extract(moments0, 16) AS d0_1,
  list_extract(moments0, 17) AS d0y_1,
  list_extract(moments0, 18) AS c1_1,
  list_extract(moments0, 19) AS c1y_1,
  list_extract(moments0, 20) AS c0_1,
  list_extract(moments0, 21) AS c0y_1,
  list_extract(moments0, 23) AS d1_2,
  list_extract(moments0, 24) AS d1y_2,
  list_extract(moments0, 25) AS d0_2,
  list_extract(moments0, 26) AS d0y_2,
  list_extract(moments0, 27) AS c1_2,
  list_extract(moments0, 28) AS c1y_2,
  list_extract(moments0, 29) AS c0_2,
  list_extract(moments0, 30) AS c0y_2,
  list_extract(moments1, 1) AS s0_0,
  list_extract(moments1, 2) AS s0_1,
  list_extract(moments1, 3) AS s0_2,
  list_extract(moments1, 4) AS s1_1,
  list_extract(moments1, 5) AS s1_2,
  list_extract(moments1, 6) AS s2_2,
  list_extract(moments2, 1) AS h0_0,
  list_extract(moments2, 2) AS h0_1,
  list_extract(moments2, 3) AS h0_2,
  list_extract(moments2, 4) AS h1_1,
  list_extract(moments2, 5) AS h1_2,
  list_extract(moments2, 6) AS h2_2
FROM
  (
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
      upshot_moments(1.0, v0, v1, t * w1d, t * w1d * y, (1.0 - t) * w0d, (1.0 - t) * w0d * y, t * w1 * (1.0 - e_raw), t * w1 * (1.0 - e_raw) * y, (1.0 - t) * w0 * e_raw, (1.0 - t) * w0 * e_raw * y) AS moments0,
      upshot_moments((t - e_raw) * (t - e_raw), v0, v1) AS moments1,
      upshot_moments(e_raw * (1.0 - e_raw), v0, v1) AS moments2
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
                      upshot_linear([0.1, 0.2, 0.3], v0, v1) AS eta
                    FROM
                      (
                        SELECT
                          "tenure_band" AS k0,
                          (CAST("prior orders" AS DOUBLE) - 2.5) / 1.5 AS v0,
                          (((CAST("prior orders" AS DOUBLE) - 2.5) / 1.5) * ((CAST("prior orders" AS DOUBLE) - 2.5) / 1.5) - 1.0) / 1.0 AS v1,
                          CAST("voucher" AS DOUBLE) AS t,
                          CAST("spend_30d" AS DOUBLE) AS y
                        FROM
                          "customers" AS src
                        WHERE
                          true AND "tenure_band" IS NOT NULL AND "prior orders" IS NOT NULL AND "voucher" IS NOT NULL AND "spend_30d" IS NOT NULL
                      ) AS rows_
                  ) AS linear_
              ) AS raw_
          ) AS propensity_
      ) AS weighted_
    GROUP BY
      k0
  ) AS sums_ ORDER BY k0
