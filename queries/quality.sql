-- quality.sql: counts of the anomalies in the event log that churnlife handles by rule (README.md,
-- "Data quality"), for the report's data-quality section.
--
-- Parameters: $log_start, $as_of (DATE), $gap_days (INT), $role_codes (LIST<VARCHAR>: every code
-- with a role), as in marks.sql and spells.sql.
-- Template slots
--   {events_normalised}  queries/events_normalised.sql (user's columns renamed to roles)
--   {customer_info}      queries/customers_from_table.sql or customers_from_events.sql
--   {marks}              the boundary marks queries/marks.sql staged from the same log
--   {spells}             the spells relation that queries/spells.sql made from those marks
--   {customer_events}    the per-customer first events queries/customer_events.sql staged
--
-- spells.sql keeps the first mark of each run (S S T T -> S T). This query counts what that rule
-- drops, and the returns that the gap rule joins to an earlier spell. The starts kept here, less
-- the joined returns, are the spells spells.sql makes (tests/test_properties.py checks it).
WITH
raw_events AS (
    {events_normalised}
),

customer_info AS (
    {customer_info}
),

-- The marks spells.sql keeps, and for each kept start the end before it: a start less than
-- $gap_days after that end joins the earlier spell.
marks_kept AS (
    SELECT
        *,
        LAG(mark_date) OVER (PARTITION BY customer_id ORDER BY event_time, mark) AS prev_kept_date
    FROM {marks}
    WHERE (mark = 'S' AND (prev_mark IS NULL OR prev_mark = 'T'))
       OR (mark = 'T' AND prev_mark = 'S')
),

joined AS (
    SELECT
        SUM(CASE WHEN mark = 'S' THEN 1 ELSE 0 END) AS n_starts_kept,
        SUM(CASE WHEN mark = 'S' AND prev_kept_date IS NOT NULL
                  AND date_diff('day', prev_kept_date, mark_date) < $gap_days
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
    FROM {marks}
),

-- Events dated before the customer's signup date (inside the window, with a role), each distinct
-- event row once, from a scan of the log; and the customers with an event (inside the window,
-- with a role: a first_time in the staged per-customer rows) who have no spell.
event_counts AS (
    SELECT
        (SELECT COUNT(*) FROM (
            SELECT DISTINCT e.*
            FROM ({events_normalised}) AS e
            JOIN customer_info AS c ON c.customer_id = e.customer_id
            WHERE e.event_time >= CAST($log_start AS TIMESTAMP)
              AND e.event_time < CAST($as_of AS TIMESTAMP) + INTERVAL 1 DAY
              AND list_contains($role_codes, e.event_kind)
              AND CAST(e.event_time AS DATE) < c.signup_date
        ) AS b)                                                        AS n_before_signup,
        (SELECT COUNT(*)
         FROM {customer_events} AS t
         LEFT JOIN (SELECT DISTINCT customer_id FROM {spells}) AS s
           ON s.customer_id = t.customer_id
         WHERE t.first_time IS NOT NULL
           AND s.customer_id IS NULL)                                  AS n_customers_without_spell
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
