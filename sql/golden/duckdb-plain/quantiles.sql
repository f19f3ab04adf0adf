WITH values_ AS (
  SELECT
    CAST("prior orders" AS DOUBLE) AS v,
    COUNT(*) AS c
  FROM
    "customers" AS src
  WHERE
    true
  GROUP BY
    CAST("prior orders" AS DOUBLE)
), cumulative_ AS (
  SELECT
    v,
    SUM(c) OVER (
      ORDER BY v
      ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW
    ) AS below,
    SUM(c) OVER (
      
    ) AS total,
    LEAD(v) OVER (
      ORDER BY v
    ) AS next_v
  FROM
    values_
)
SELECT
  COUNT(*) AS distinct_values,
  MIN(total) AS n,
  MIN(v) AS lo,
  MAX(v) AS hi,
  MIN(CASE WHEN below * 3 >= total * 0 THEN next_v END) AS after0,
  MIN(CASE WHEN below * 3 >= total * 1 THEN v END) AS cut1,
  MIN(CASE WHEN below * 3 >= total * 1 THEN next_v END) AS after1,
  MIN(CASE WHEN below * 3 >= total * 2 THEN v END) AS cut2,
  MIN(CASE WHEN below * 3 >= total * 2 THEN next_v END) AS after2
FROM
  cumulative_
