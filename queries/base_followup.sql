-- base_followup.sql: of the spells active on an earlier as-of date (staged by a run with that
-- date), how many were still active at the end of day $on_date in the full log's spells (staged
-- by a run with the later date, in the same engine), per cohort. For the forecast backtest
-- (churnlife.value.backtest). A spell is matched by customer and start date; it is active at the
-- end of a day when it has not ended or ended after that day (end_date is its last active day).
--
-- Parameters
--   $on_date   DATE
-- Template slots
--   {spells}                                      the spells as of the earlier date
--   {later_spells}                                the spells as of the later date
--   {cohort_cols}, {cohort_names}, {cohort_label} as in queries/counts.sql
WITH
earlier AS (
    SELECT {cohort_cols}, customer_id, start_date
    FROM {spells}
    WHERE NOT churned
),

later AS (
    SELECT customer_id, start_date, end_date FROM {later_spells}
),

followed AS (
    SELECT e.*, l.end_date, l.customer_id IS NOT NULL AS found
    FROM earlier AS e
    LEFT JOIN later AS l ON l.customer_id = e.customer_id AND l.start_date = e.start_date
)

SELECT
    {cohort_label} AS cohort,
    CAST(COUNT(*) AS BIGINT) AS active_then,
    CAST(SUM(CASE WHEN found AND (end_date IS NULL OR end_date > CAST($on_date AS DATE))
                  THEN 1 ELSE 0 END) AS BIGINT) AS still_active
FROM followed
GROUP BY {cohort_names}
ORDER BY cohort
