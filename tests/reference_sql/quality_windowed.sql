-- quality.sql: counts of the anomalies in the event log that churnlife handles by rule (README.md,
-- "Data quality"), for the report's data-quality section.
--
-- Parameters: as spells.sql ($log_start, $as_of, $grace_days, $gap_days, $start_codes ...
-- $plan_change_codes).
-- Template slots
--   {events_normalised}  queries/events_normalised.sql (user's columns renamed to roles)
--   {customer_info}      queries/customers_from_table.sql or customers_from_events.sql
--   {spells}             the spells relation that queries/spells.sql produced from the same log
--
-- The boundary marks (S = start, T = end) are formed exactly as in spells.sql, which keeps the first
-- mark of each run (S S T T -> S T). This query counts what that rule drops, and the returns that
-- the gap rule joins to an earlier spell. If the marks in spells.sql change, change them here too:
-- tests/test_properties.py checks that the starts kept here, less the joined returns, equal the
-- number of spells spells.sql makes.
WITH
raw_events AS (
    {events_normalised}
),

customer_info AS (
    {customer_info}
),

ev AS (
    SELECT
        customer_id,
        event_time,
        CAST(event_time AS DATE) AS event_date,
        plan,
        price,
        cancel_reason,
        CASE
            WHEN list_contains($start_codes, event_kind)             THEN 'start'
            WHEN list_contains($renewal_codes, event_kind)           THEN 'renewal'
            WHEN list_contains($cancel_codes, event_kind)            THEN 'cancel'
            WHEN list_contains($payment_failed_codes, event_kind)    THEN 'payment_failed'
            WHEN list_contains($payment_recovered_codes, event_kind) THEN 'payment_recovered'
            WHEN list_contains($price_change_codes, event_kind)      THEN 'price_change'
            WHEN list_contains($plan_change_codes, event_kind)       THEN 'plan_change'
        END AS role
    FROM raw_events
    WHERE event_time >= CAST($log_start AS TIMESTAMP)
      AND event_time < CAST($as_of AS TIMESTAMP) + INTERVAL 1 DAY
      AND customer_id IS NOT NULL
),

ev_next_ok AS (
    SELECT
        *,
        MIN(CASE WHEN role IN ('payment_recovered', 'renewal') THEN event_date END) OVER (
            PARTITION BY customer_id ORDER BY event_time
            ROWS BETWEEN 1 FOLLOWING AND UNBOUNDED FOLLOWING
        ) AS next_ok_date
    FROM ev
    WHERE role IS NOT NULL
),

first_in_log AS (
    SELECT customer_id, role
    FROM (
        SELECT
            customer_id, role,
            ROW_NUMBER() OVER (PARTITION BY customer_id ORDER BY event_time) AS rn
        FROM ev_next_ok
    ) AS t
    WHERE rn = 1
),

marks AS (
    SELECT customer_id, event_time, 'S' AS mark, CAST(NULL AS VARCHAR) AS cause
    FROM ev_next_ok WHERE role = 'start'
    UNION ALL
    SELECT customer_id, event_time, 'T', 'voluntary'
    FROM ev_next_ok WHERE role = 'cancel'
    UNION ALL
    SELECT customer_id, event_time, 'T', 'involuntary'
    FROM ev_next_ok
    WHERE role = 'payment_failed'
      AND (next_ok_date IS NULL OR next_ok_date > event_date + $grace_days)
      AND event_date + $grace_days <= $as_of
    UNION ALL
    SELECT f.customer_id, CAST(c.signup_date AS TIMESTAMP), 'S', CAST(NULL AS VARCHAR)
    FROM first_in_log AS f
    JOIN customer_info AS c ON c.customer_id = f.customer_id
    WHERE c.signup_date < $log_start AND f.role <> 'start'
),

marks_ordered AS (
    SELECT
        *,
        LAG(mark) OVER (PARTITION BY customer_id ORDER BY event_time, mark) AS prev_mark
    FROM marks
),

-- The marks spells.sql keeps, and for each kept start the end before it: a start less than
-- $gap_days after that end joins the earlier spell.
marks_kept AS (
    SELECT
        *,
        LAG(CAST(event_time AS DATE)) OVER (
            PARTITION BY customer_id ORDER BY event_time, mark) AS prev_kept_date
    FROM marks_ordered
    WHERE (mark = 'S' AND (prev_mark IS NULL OR prev_mark = 'T'))
       OR (mark = 'T' AND prev_mark = 'S')
),

joined AS (
    SELECT
        SUM(CASE WHEN mark = 'S' THEN 1 ELSE 0 END) AS n_starts_kept,
        SUM(CASE WHEN mark = 'S' AND prev_kept_date IS NOT NULL
                  AND CAST(event_time AS DATE) - prev_kept_date < $gap_days
                 THEN 1 ELSE 0 END)                 AS n_joined_returns
    FROM marks_kept
),

mark_counts AS (
    SELECT
        SUM(CASE WHEN mark = 'S' AND prev_mark = 'S' THEN 1 ELSE 0 END)      AS n_start_in_open_spell,
        SUM(CASE WHEN mark = 'T' AND cause = 'voluntary' AND (prev_mark IS NULL OR prev_mark = 'T')
                 THEN 1 ELSE 0 END)                                          AS n_cancel_without_spell,
        SUM(CASE WHEN mark = 'T' AND cause = 'involuntary'
                  AND (prev_mark IS NULL OR prev_mark = 'T')
                 THEN 1 ELSE 0 END)                                          AS n_failure_without_spell
    FROM marks_ordered
),

event_counts AS (
    SELECT
        SUM(CASE WHEN e.event_date < c.signup_date THEN 1 ELSE 0 END)  AS n_before_signup,
        COUNT(DISTINCT CASE WHEN s.customer_id IS NULL THEN e.customer_id END)
                                                                       AS n_customers_without_spell
    FROM ev_next_ok AS e
    LEFT JOIN customer_info AS c ON c.customer_id = e.customer_id
    LEFT JOIN (SELECT DISTINCT customer_id FROM {spells}) AS s ON s.customer_id = e.customer_id
),

spell_counts AS (
    SELECT
        SUM(CASE WHEN price <= 0 THEN 1 ELSE 0 END)       AS n_nonpositive_price
    FROM {spells}
)

SELECT
    m.n_start_in_open_spell,
    m.n_cancel_without_spell,
    m.n_failure_without_spell,
    j.n_joined_returns,
    j.n_starts_kept,
    e.n_before_signup,
    e.n_customers_without_spell,
    s.n_nonpositive_price
FROM mark_counts AS m, joined AS j, event_counts AS e, spell_counts AS s
