WITH rows_ AS (
  SELECT
    k0,
    upshot_linear([0.1, 0.2, 0.3], v0, v1) AS s,
    t,
    y,
    k1 AS u
  FROM
    (
      SELECT
        "tenure_band" AS k0,
        "customer_id" AS k1,
        (CAST("prior orders" AS DOUBLE) - 2.5) / 1.5 AS v0,
        (((CAST("prior orders" AS DOUBLE) - 2.5) / 1.5) * ((CAST("prior orders" AS DOUBLE) - 2.5) / 1.5) - 1.0) / 1.0 AS v1,
        CAST("voucher" AS DOUBLE) AS t,
        CAST("spend_30d" AS DOUBLE) AS y
      FROM
        "customers" AS src
      WHERE
        true AND "tenure_band" IS NOT NULL AND "customer_id" IS NOT NULL AND "prior orders" IS NOT NULL AND "voucher" IS NOT NULL AND "spend_30d" IS NOT NULL
    ) AS design_
), ranked_ AS (
  SELECT
    k0,
    s,
    sq,
    t,
    y,
    u,
    DENSE_RANK() OVER (
      PARTITION BY k0, t
      ORDER BY sq
    ) AS r
  FROM
    (
      SELECT
        k0,
        s,
        t,
        y,
        u,
        CAST(FLOOR(s * 1000000000.0 + 0.5) AS DOUBLE) AS sq
      FROM
        rows_
    ) AS grid_
), spread_ AS (
  SELECT
    k0,
    SQRT((VAR_SAMP(CASE WHEN t = 1.0 THEN s END) + VAR_SAMP(CASE WHEN t = 0.0 THEN s END)) / 2.0) AS sdl
  FROM
    rows_
  GROUP BY
    k0
), cells_ AS (
  SELECT
    k0,
    t,
    r,
    MIN(sq) AS s,
    CAST(COUNT(*) AS DOUBLE) AS n,
    SUM(y) AS sy,
    COALESCE(VAR_SAMP(y), 0.0) AS vy
  FROM
    ranked_
  GROUP BY
    k0, t, r
), adjacent_ AS (
  SELECT
    k0,
    t,
    r,
    s,
    n,
    sy,
    vy,
    COUNT(CASE WHEN t = 1.0 THEN 1 END) OVER (
      PARTITION BY k0
      ORDER BY s, t
      ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW
    ) AS c1,
    COUNT(CASE WHEN t = 0.0 THEN 1 END) OVER (
      PARTITION BY k0
      ORDER BY s, t
      ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW
    ) AS c0,
    LAG(s) OVER (
      PARTITION BY k0, t
      ORDER BY r
    ) AS ps,
    LAG(n) OVER (
      PARTITION BY k0, t
      ORDER BY r
    ) AS pn,
    LAG(sy) OVER (
      PARTITION BY k0, t
      ORDER BY r
    ) AS psy,
    LEAD(s) OVER (
      PARTITION BY k0, t
      ORDER BY r
    ) AS ns,
    LEAD(n) OVER (
      PARTITION BY k0, t
      ORDER BY r
    ) AS nn,
    LEAD(sy) OVER (
      PARTITION BY k0, t
      ORDER BY r
    ) AS nsy
  FROM
    cells_
), placed_ AS (
  SELECT
    k0,
    t,
    r,
    s,
    n,
    sy,
    vy,
    c1,
    c0,
    CASE
      WHEN n >= 2.0 THEN
        n * vy
      WHEN ps IS NULL AND ns IS NULL THEN
        NULL
      WHEN ns IS NULL OR (ps IS NOT NULL AND s - ps < ns - s) THEN
        (pn / (pn + 1.0)) * (sy - psy / pn) * (sy - psy / pn)
      WHEN ps IS NULL OR ns - s < s - ps THEN
        (nn / (nn + 1.0)) * (sy - nsy / nn) * (sy - nsy / nn)
      ELSE
        ((pn + nn) / ((pn + nn) + 1.0)) * (sy - (psy + nsy) / (pn + nn)) * (sy - (psy + nsy) / (pn + nn))
    END AS sv
  FROM
    adjacent_
), cand_ AS (
  SELECT
    a.k0,
    a.t,
    a.r,
    a.n AS an,
    b.r AS rm,
    b.n AS bn,
    b.sy AS bsy,
    ABS(a.s - b.s) AS dist,
    sp.sdl
  FROM
    placed_ AS a
    CROSS JOIN (VALUES (1), (2), (3), (4)) AS o_ (j)
    JOIN placed_ AS b ON b.k0 = a.k0 AND b.t = 1.0 - a.t AND b.r = CASE WHEN a.t = 1.0 THEN a.c0 ELSE a.c1 END - 2 + o_.j
    JOIN spread_ AS sp ON sp.k0 = a.k0
  WHERE
    a.t = 1.0
), near_ AS (
  SELECT
    k0,
    t,
    r,
    an,
    rm,
    bn,
    bsy,
    dist,
    sdl,
    SUM(bn) OVER (PARTITION BY k0, t, r ORDER BY dist RANGE BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW) - SUM(bn) OVER (PARTITION BY k0, t, r, dist) AS closer
  FROM
    cand_
), pairs_ AS (
  SELECT
    k0,
    t,
    r,
    an,
    rm,
    bn,
    bsy,
    dist,
    SUM(bn) OVER (
      PARTITION BY k0, t, r
    ) AS m
  FROM
    near_
  WHERE
    closer < 2 AND dist <= 0.2 * sdl * 1000000000.0
), targets_ AS (
  SELECT
    k0,
    t,
    r,
    SUM(bsy) / SUM(bn) AS cf,
    SUM(bn * dist) / SUM(bn) / 1000000000.0 AS distance,
    MAX(m) AS m
  FROM
    pairs_
  GROUP BY
    k0, t, r
), used_ AS (
  SELECT
    k0,
    t AS tt,
    rm,
    SUM(an / m) AS w,
    SUM(an / (m * m)) AS q
  FROM
    pairs_
  GROUP BY
    k0, t, rm
)
SELECT
  k0,
  SUM(n) AS n,
  SUM(n * t) AS n1,
  SUM(CASE WHEN gr IS NULL THEN 0.0 ELSE n * t END) AS matched1,
  SUM(CASE WHEN gr IS NULL THEN 0.0 ELSE n * (1.0 - t) END) AS matched0,
  COALESCE(SUM(d), 0.0) AS sd,
  COALESCE(SUM(dd), 0.0) AS sdd,
  COALESCE(SUM((w * w - q + CASE WHEN gr IS NULL THEN 0.0 ELSE 2.0 * w END) * sv), 0.0) AS sv,
  SUM(CASE WHEN w IS NOT NULL AND sv IS NULL THEN n ELSE 0.0 END) AS lone,
  SUM(CASE WHEN w IS NULL THEN 0.0 ELSE n * t END) AS used1,
  SUM(CASE WHEN w IS NULL THEN 0.0 ELSE n * (1.0 - t) END) AS used0,
  COALESCE(MAX(w), 0.0) AS maxw,
  COALESCE(SUM(n * distance), 0.0) AS sdist,
  COALESCE(MAX(distance), 0.0) AS maxdist,
  MAX(sdl) AS sdl,
  MIN(CASE WHEN t = 1.0 THEN s END) / 1000000000.0 AS lo1,
  MAX(CASE WHEN t = 1.0 THEN s END) / 1000000000.0 AS hi1,
  MIN(CASE WHEN t = 0.0 THEN s END) / 1000000000.0 AS lo0,
  MAX(CASE WHEN t = 0.0 THEN s END) / 1000000000.0 AS hi0
FROM
  (
    SELECT
      o.k0 AS k0,
      o.t,
      o.s,
      o.n,
      o.sv,
      sp.sdl,
      g.r AS gr,
      g.distance,
      (2.0 * o.t - 1.0) * (o.sy - o.n * g.cf) AS d,
      (o.n - 1.0) * o.vy + o.n * (o.sy / o.n - g.cf) * (o.sy / o.n - g.cf) AS dd,
      w_.w,
      w_.q
    FROM
      placed_ AS o
      JOIN spread_ AS sp ON sp.k0 = o.k0
      LEFT JOIN targets_ AS g ON g.k0 = o.k0 AND g.t = o.t AND g.r = o.r AND o.t = 1.0
      LEFT JOIN used_ AS w_ ON w_.k0 = o.k0 AND w_.tt = 1.0 - o.t AND w_.rm = o.r
  ) AS cell_
GROUP BY
  k0 ORDER BY k0
