-- revenue_by_tenure.sql: money collected per cohort × tenure, and how many spells were present to
-- pay it, from the staged spells (queries/spells.sql) and the payment events of the log.
--
-- A payment (start, renewal or recovered charge, with a price) belongs to the spell of the same
-- customer whose days contain it; its tenure k is the whole tenure units completed at the payment
-- (the calendar rules of spells.sql: complete calendar months, days, weeks, or months / period
-- length). A spell is present at tenure k when the log saw it then: entry_exact <= k <= exit_exact
-- (late entrants are not present before the log starts; active spells stop at the as-of date);
-- the query returns +1/-1 presence steps, summed over tenure by churnlife.value.revenue.
-- revenue_gross caps each payment at the spell's starting price (no expansion), for gross revenue
-- retention.
--
-- Parameters
--   $log_start, $as_of   DATE           the window
--   $payment_codes       LIST<VARCHAR>  event kinds that carry a payment
-- Template slots
--   {spells}             the staged spells relation
--   {events_normalised}  queries/events_normalised.sql
--   {period_months}      SQL expression: billing period length in months of column `plan`
--   {unit}               'days' | 'weeks' | 'months' | 'periods' (a literal chosen by churnlife)
--   {cohort_cols}, {cohort_names}, {cohort_label}   as in queries/counts.sql
WITH
raw_events AS (
    {events_normalised}
),

payments AS (
    SELECT customer_id, CAST(event_time AS DATE) AS paid_on, price AS amount
    FROM raw_events
    WHERE list_contains($payment_codes, event_kind)
      AND price IS NOT NULL
      AND event_time >= CAST($log_start AS TIMESTAMP)
      AND event_time < CAST($as_of AS TIMESTAMP) + INTERVAL 1 DAY
),

paid0 AS (
    SELECT
        s.*, p.paid_on, p.amount,
        CAST(12 * (EXTRACT(YEAR FROM p.paid_on) - EXTRACT(YEAR FROM s.start_date))
             + EXTRACT(MONTH FROM p.paid_on) - EXTRACT(MONTH FROM s.start_date) AS INTEGER) AS m0
    FROM {spells} AS s
    JOIN payments AS p
      ON p.customer_id = s.customer_id
     AND p.paid_on >= s.start_date
     AND p.paid_on <= COALESCE(s.end_date, CAST($as_of AS DATE))
),

paid AS (
    SELECT
        *,
        -- complete calendar months: one less when the month-step's day is not yet reached
        m0 - CASE WHEN CAST(start_date + to_months(m0) AS DATE) > paid_on THEN 1 ELSE 0 END
            AS months_done
    FROM paid0
),

paid_k AS (
    SELECT
        {cohort_cols},
        CAST(CASE '{unit}'
            WHEN 'days'  THEN date_diff('day', start_date, paid_on)
            WHEN 'weeks' THEN FLOOR(date_diff('day', start_date, paid_on) / 7.0)
            WHEN 'months' THEN months_done
            ELSE FLOOR(months_done / {period_months} + 1e-9)
        END AS INTEGER) AS tenure,
        amount,
        LEAST(amount, COALESCE(price, amount)) AS amount_gross
    FROM paid
),

revenue AS (
    SELECT {cohort_names}, tenure,
           COUNT(*) AS payments, SUM(amount) AS revenue, SUM(amount_gross) AS revenue_gross
    FROM paid_k
    GROUP BY {cohort_names}, tenure
),

-- presence as +1 at the first whole tenure seen and -1 after the last
spell_cohorts AS (
    SELECT {cohort_cols}, entry_exact, exit_exact
    FROM {spells}
    WHERE CEIL(entry_exact - 1e-9) <= FLOOR(exit_exact + 1e-9)
),

steps AS (
    SELECT {cohort_names}, CAST(CEIL(entry_exact - 1e-9) AS INTEGER) AS tenure, 1 AS step
    FROM spell_cohorts
    UNION ALL
    SELECT {cohort_names}, CAST(FLOOR(exit_exact + 1e-9) AS INTEGER) + 1, -1
    FROM spell_cohorts
),

step_sums AS (
    SELECT {cohort_names}, tenure, SUM(step) AS step FROM steps GROUP BY {cohort_names}, tenure
)

-- one row per cohort × tenure that has a payment or a presence step; churnlife sums the steps
-- over tenure (a running total) to get the spells present
SELECT
    {cohort_label} AS cohort,
    tenure,
    COALESCE(s.step, 0) AS presence_step,
    COALESCE(r.payments, 0) AS payments,
    COALESCE(r.revenue, 0.0) AS revenue,
    COALESCE(r.revenue_gross, 0.0) AS revenue_gross
FROM step_sums AS s
FULL OUTER JOIN revenue AS r USING ({cohort_names}, tenure)
ORDER BY cohort, tenure
