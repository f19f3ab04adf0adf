SELECT
  COUNT(*) AS n_rows,
  COUNT(`spend 30d`) AS c0_n,
  MIN(`spend 30d`) AS c0_min,
  MAX(`spend 30d`) AS c0_max,
  AVG(CAST(`spend 30d` AS DOUBLE)) AS c0_mean,
  SUM(CAST(`spend 30d` AS DOUBLE) * CAST(`spend 30d` AS DOUBLE)) AS c0_ss,
  approx_count_distinct(`spend 30d`) AS c0_distinct,
  COUNT(`select`) AS c1_n,
  approx_count_distinct(`select`) AS c1_distinct,
  SUM(CASE WHEN `spend 30d` IS NOT NULL AND `select` IS NOT NULL THEN 1 ELSE 0 END) AS n_complete
FROM
  `main`.`order lines` AS src
WHERE
  ("zone" <> 'Old Town' AND prior_orders >= 0)
