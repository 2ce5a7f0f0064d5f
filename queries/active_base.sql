-- active_base.sql: the customers active at the as-of date, per cohort × tenure completed, from
-- the staged spells (queries/spells.sql). A spell that ended (even inside the last, uncounted
-- unit) is not active.
--
-- Template slots
--   {spells}                                      the staged spells relation
--   {cohort_cols}, {cohort_names}, {cohort_label} as in queries/counts.sql
WITH active AS (
    SELECT {cohort_cols}, exit_t, price
    FROM {spells}
    WHERE NOT churned
)
SELECT
    {cohort_label} AS cohort,
    CAST(exit_t AS INTEGER) AS tenure,
    COUNT(*) AS active,
    AVG(price) AS mean_start_price
FROM active
GROUP BY {cohort_names}, exit_t
ORDER BY cohort, tenure
