SELECT
  COUNT(*) AS n,
  SUM(t) AS n1,
  SUM((t - p)) AS u0,
  SUM((t - p) * v0) AS u1,
  SUM((t - p) * v1) AS u2,
  SUM(p * (1.0 - p)) AS h0_0,
  SUM(p * (1.0 - p) * v0) AS h0_1,
  SUM(p * (1.0 - p) * v1) AS h0_2,
  SUM(p * (1.0 - p) * v0 * v0) AS h1_1,
  SUM(p * (1.0 - p) * v0 * v1) AS h1_2,
  SUM(p * (1.0 - p) * v1 * v1) AS h2_2,
  SUM(t * eta - CASE WHEN eta > 0 THEN eta + LN(1.0 + EXP(-eta)) ELSE LN(1.0 + EXP(eta)) END) AS loglik,
  MIN(p) AS min_p,
  MAX(p) AS max_p
FROM
  (
    SELECT
      *,
      CASE
        WHEN eta >= 0 THEN
          1.0 / (1.0 + EXP(-eta))
        ELSE
          EXP(eta) / (1.0 + EXP(eta))
      END AS p
    FROM
      (
        SELECT
          *,
          0.25E0 + -0.75E0 * v0 + 0.3333333333333333E0 * v1 AS eta
        FROM
          (
            SELECT
              (CAST(`prior_orders` AS DOUBLE) - 2.65E0) / 1.7E0 AS v0,
              (CASE WHEN CAST(`zone` AS STRING) = 'Old Town' THEN 1.0 ELSE 0.0 END - 0.17E0) / 0.375E0 AS v1,
              CAST(`voucher` AS DOUBLE) AS t
            FROM
              `main`.`order lines` AS src
            WHERE
              true AND `prior_orders` IS NOT NULL AND `zone` IS NOT NULL AND `voucher` IS NOT NULL
          ) AS rows_
      ) AS linear_
  ) AS fitted_
