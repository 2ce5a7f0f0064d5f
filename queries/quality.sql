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

-- Events inside the window with their role, every column kept: DISTINCT on these rows drops
-- exact duplicates (events_normalised.sql keeps them) where a count depends on them.
ev AS (
    SELECT
        *,
        CAST(event_time AS DATE) AS event_date,
        CASE
            WHEN list_contains($start_codes, event_kind)             THEN 'start'
            WHEN list_contains($renewal_codes, event_kind)           THEN 'renewal'
            WHEN list_contains($cancel_codes, event_kind)            THEN 'cancel'
            WHEN list_contains($payment_failed_codes, event_kind)    THEN 'payment_failed'
            WHEN list_contains($payment_recovered_codes, event_kind) THEN 'payment_recovered'
            WHEN list_contains($price_change_codes, event_kind)      THEN 'price_change'
            WHEN list_contains($plan_change_codes, event_kind)       THEN 'plan_change'
        END AS role
    -- its own scan of the log, not the raw_events CTE (which customer_info may read): a CTE
    -- read by several queries is materialised, a copy of every event
    FROM ({events_normalised}) AS raw
    WHERE event_time >= CAST($log_start AS TIMESTAMP)
      AND event_time < CAST($as_of AS TIMESTAMP) + INTERVAL 1 DAY
      AND customer_id IS NOT NULL
),

ev_roles AS (
    SELECT * FROM ev WHERE role IS NOT NULL
),

-- The events that can be a mark, each distinct row once.
ev_marks AS (
    SELECT DISTINCT * FROM ev_roles WHERE role IN ('start', 'cancel', 'payment_failed')
),

-- As in spells.sql: failed payments with no payment through by the failure's date + $grace_days.
unrecovered AS (
    SELECT f.customer_id, f.event_time
    FROM ev_marks AS f
    WHERE f.role = 'payment_failed'
      AND f.event_date + $grace_days <= $as_of
      AND NOT EXISTS (
          SELECT 1
          FROM ev_roles AS ok
          WHERE ok.customer_id = f.customer_id
            AND ok.role IN ('payment_recovered', 'renewal')
            AND ok.event_time > f.event_time
            AND ok.event_date <= f.event_date + $grace_days
      )
),

-- As in spells.sql: the first event in the log (a start among events at the first instant wins).
first_time AS (
    SELECT customer_id, MIN(event_time) AS first_time
    FROM ev_roles
    GROUP BY customer_id
),

first_in_log AS (
    SELECT
        e.customer_id,
        CASE WHEN MAX(CASE WHEN e.role = 'start' THEN 1 ELSE 0 END) = 1
             THEN 'start' ELSE 'other' END AS role
    FROM ev_roles AS e
    JOIN first_time AS t
      ON t.customer_id = e.customer_id AND t.first_time = e.event_time
    GROUP BY e.customer_id
),

marks AS (
    SELECT customer_id, event_time, 'S' AS mark, CAST(NULL AS VARCHAR) AS cause
    FROM ev_marks WHERE role = 'start'
    UNION ALL
    SELECT customer_id, event_time, 'T', 'voluntary'
    FROM ev_marks WHERE role = 'cancel'
    UNION ALL
    SELECT customer_id, event_time, 'T', 'involuntary'
    FROM unrecovered
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
                  AND date_diff('day', prev_kept_date, CAST(event_time AS DATE)) < $gap_days
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
        (SELECT COUNT(*) FROM (
            SELECT DISTINCT e.*
            FROM ev_roles AS e
            JOIN customer_info AS c ON c.customer_id = e.customer_id
            WHERE e.event_date < c.signup_date
        ) AS b)                                                        AS n_before_signup,
        (SELECT COUNT(*)
         FROM first_time AS t
         LEFT JOIN (SELECT DISTINCT customer_id FROM {spells}) AS s
           ON s.customer_id = t.customer_id
         WHERE s.customer_id IS NULL)                                  AS n_customers_without_spell
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
