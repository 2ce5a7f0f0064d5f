-- counts.sql: survival counts per cohort × tenure, from the spells (queries/spells.sql).
--
-- Template slots
--   {spells}        the spells relation
--   {cohort_cols}   comma-separated cohort attribute columns chosen from churnlife's own list
--                   (signup_month, signup_quarter, signup_year, plan, channel, price_band),
--                   or the constant  'all customers' AS cohort_all  when no cohort is chosen
--   {cohort_names}  the same columns, names only
--   {cohort_label}  SQL expression joining them into one label
--
-- Integer tenure t names the interval (t-1, t]. Per DEVELOPERS.md: a spell enters at entry_t, a
-- counted churn at exit_t = ceil(exit_exact), a censoring at exit_t = floor(counted_exit_exact),
-- and a spell is at risk at t when entry_t < t <= exit_t. Exposure is exact customer-time inside
-- (t-1, t], up to the last whole unit of the window (counted_exit_exact).
WITH
s AS (
    SELECT
        {cohort_cols},
        entry_t,
        exit_t,
        churn_counted AS churned,
        cause,
        entry_exact AS a,
        counted_exit_exact AS b,
        CAST(FLOOR(entry_exact) AS INTEGER) + 1 AS ia,   -- interval holding the entry instant
        CAST(CEIL(counted_exit_exact) AS INTEGER) AS ib  -- interval holding the exit instant
    FROM {spells}
),

-- Each spell's contributions, as signed pieces to be summed per cohort × tenure.
pieces AS (
    -- enters at entry_t
    SELECT {cohort_names}, entry_t AS tenure, 1 AS entered, 0 AS churned, 0 AS churned_vol,
           0 AS churned_invol, 0 AS censored, 0.0 AS part, 0 AS full_step
    FROM s
    UNION ALL
    -- leaves at exit_t, churned or censored
    SELECT {cohort_names}, exit_t, 0,
           CASE WHEN churned THEN 1 ELSE 0 END,
           CASE WHEN churned AND cause = 'voluntary' THEN 1 ELSE 0 END,
           CASE WHEN churned AND cause = 'involuntary' THEN 1 ELSE 0 END,
           CASE WHEN churned THEN 0 ELSE 1 END,
           0.0, 0
    FROM s
    UNION ALL
    -- exposure inside the entry interval (the whole spell if it ends there too)
    SELECT {cohort_names}, ia, 0, 0, 0, 0, 0,
           CASE WHEN ib = ia THEN b - a ELSE ia - a END, 0
    FROM s WHERE b > a
    UNION ALL
    -- exposure inside the exit interval, when it differs from the entry interval
    SELECT {cohort_names}, ib, 0, 0, 0, 0, 0, b - (ib - 1), 0
    FROM s WHERE ib > ia
    UNION ALL
    -- whole intervals strictly between: +1 from ia + 1, -1 from ib (summed cumulatively below)
    SELECT {cohort_names}, ia + 1, 0, 0, 0, 0, 0, 0.0, 1 FROM s WHERE ib > ia + 1
    UNION ALL
    SELECT {cohort_names}, ib, 0, 0, 0, 0, 0, 0.0, -1 FROM s WHERE ib > ia + 1
),

per_tenure AS (
    SELECT
        {cohort_names},
        tenure,
        SUM(entered)       AS entered,
        SUM(churned)       AS churned,
        SUM(churned_vol)   AS churned_voluntary,
        SUM(churned_invol) AS churned_involuntary,
        SUM(censored)      AS censored,
        SUM(part)          AS part,
        SUM(full_step)     AS full_step
    FROM pieces
    GROUP BY {cohort_names}, tenure
),

-- Every tenure from a cohort's first to its last row, so intervals with only whole-interval
-- exposure get a row too.
bounds AS (
    SELECT {cohort_names}, MIN(tenure) AS lo, MAX(tenure) AS hi
    FROM per_tenure
    GROUP BY {cohort_names}
),

grid AS (
    SELECT {cohort_names}, UNNEST(generate_series(lo, hi)) AS tenure
    FROM bounds
),

filled AS (
    SELECT
        {grid_names},
        g.tenure,
        COALESCE(p.entered, 0)             AS entered,
        COALESCE(p.churned, 0)             AS churned,
        COALESCE(p.churned_voluntary, 0)   AS churned_voluntary,
        COALESCE(p.churned_involuntary, 0) AS churned_involuntary,
        COALESCE(p.censored, 0)            AS censored,
        COALESCE(p.part, 0.0)              AS part,
        COALESCE(p.full_step, 0)           AS full_step
    FROM grid AS g
    LEFT JOIN per_tenure AS p
      ON {join_on} AND p.tenure = g.tenure
),

counted AS (
    SELECT
        *,
        COALESCE(SUM(entered - churned - censored) OVER (
            PARTITION BY {cohort_names} ORDER BY tenure
            ROWS BETWEEN UNBOUNDED PRECEDING AND 1 PRECEDING), 0) AS at_risk,
        part + SUM(full_step) OVER (
            PARTITION BY {cohort_names} ORDER BY tenure
            ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW) AS exposure
    FROM filled
)

SELECT
    {cohort_names},
    {cohort_label} AS cohort,
    CAST(tenure AS INTEGER)              AS tenure,
    CAST(at_risk AS BIGINT)              AS at_risk,
    CAST(entered AS BIGINT)              AS entered,
    CAST(churned AS BIGINT)              AS churned,
    CAST(churned_voluntary AS BIGINT)    AS churned_voluntary,
    CAST(churned_involuntary AS BIGINT)  AS churned_involuntary,
    CAST(censored AS BIGINT)             AS censored,
    CAST(exposure AS DOUBLE)             AS exposure
FROM counted
WHERE at_risk > 0 OR entered > 0 OR churned > 0 OR censored > 0 OR exposure > 0
ORDER BY {cohort_names}, tenure
