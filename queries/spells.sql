-- spells.sql: one row per customer subscription spell, from the event log.
--
-- Parameters
--   $log_start, $as_of        DATE   the window: the log's first day, and the censoring date
--   $grace_days               INT    a failed payment not recovered within this many days ends the spell
--   $gap_days                 INT    a restart less than this many days after an end continues the spell
--   $start_codes ... $plan_change_codes   LIST<VARCHAR>  event kinds for each role
-- Template slots
--   {events_normalised}  queries/events_normalised.sql (user's columns renamed to roles)
--   {customer_info}      queries/customers_from_table.sql or customers_from_events.sql
--   {period_months}      SQL expression: billing period length in months of column `plan`
--   {price_band}         SQL expression: price band label of column `price`
--   {unit}               'days' | 'weeks' | 'months' | 'periods' (a literal chosen by churnlife)
--
-- Conventions (DEVELOPERS.md, "Time and tenure"): a spell is active on every day from start_date to
-- end_date inclusive; it is observed from entry_date (its start, or the log's first day for a
-- customer who began before the log); its exit instant is the end of its last active day.
WITH
raw_events AS (
    {events_normalised}
),

customer_info AS (
    {customer_info}
),

-- Events inside the window, with their role. Events after the as-of date are ignored.
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
    -- its own scan of the log, not the raw_events CTE (which customer_info may read): a CTE
    -- read by several queries is materialised, a copy of every event
    FROM ({events_normalised}) AS raw
    WHERE event_time >= CAST($log_start AS TIMESTAMP)
      AND event_time < CAST($as_of AS TIMESTAMP) + INTERVAL 1 DAY
      AND customer_id IS NOT NULL
),

-- Events with a role (codes listed under ignore have none).
ev_roles AS (
    SELECT * FROM ev WHERE role IS NOT NULL
),

-- Failed payments not recovered within the grace period: no later payment went through (a
-- recovery or a renewal) by the failure's date + $grace_days. A join on the customer, not a
-- window over every event of the log: failures are few, and only they need the look-ahead.
unrecovered AS (
    SELECT f.customer_id, f.event_time, f.event_date, f.plan, f.price
    FROM ev_roles AS f
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

-- Customers who began before the log and are still active when it starts: their first event in the
-- log is not a start. They enter late, at their known signup date. The first event is found by
-- its time (an aggregate, not a sort of every event); when several events share that first
-- instant, a start among them counts as the first event, else the smallest plan and price.
first_time AS (
    SELECT customer_id, MIN(event_time) AS first_time
    FROM ev_roles
    GROUP BY customer_id
),

first_in_log AS (
    SELECT
        e.customer_id,
        CASE WHEN MAX(CASE WHEN e.role = 'start' THEN 1 ELSE 0 END) = 1
             THEN 'start' ELSE 'other' END AS role,
        MIN(e.plan) AS plan,
        MIN(e.price) AS price
    FROM ev_roles AS e
    JOIN first_time AS t
      ON t.customer_id = e.customer_id AND t.first_time = e.event_time
    GROUP BY e.customer_id
),

-- Spell boundary marks: S = a start, T = an end (a cancel, or a failed payment that was not
-- recovered within the grace period and whose grace period is over by the as-of date).
marks AS (
    SELECT customer_id, event_time, event_date AS mark_date, 'S' AS mark, plan, price,
           CAST(NULL AS VARCHAR) AS cause, CAST(NULL AS VARCHAR) AS cancel_reason,
           FALSE AS late_entry
    FROM ev_roles WHERE role = 'start'
    UNION ALL
    SELECT customer_id, event_time, event_date, 'T', plan, price,
           'voluntary', cancel_reason, FALSE
    FROM ev_roles WHERE role = 'cancel'
    UNION ALL
    SELECT customer_id, event_time, event_date, 'T', plan, price,
           'involuntary', CAST(NULL AS VARCHAR), FALSE
    FROM unrecovered
    UNION ALL
    SELECT f.customer_id, CAST(c.signup_date AS TIMESTAMP), c.signup_date, 'S', f.plan, f.price,
           CAST(NULL AS VARCHAR), CAST(NULL AS VARCHAR), TRUE
    FROM first_in_log AS f
    JOIN customer_info AS c ON c.customer_id = f.customer_id
    WHERE c.signup_date < $log_start AND f.role <> 'start'
),

-- Keep the first mark of each run: S S T T S T -> S T S T. A second start inside an open spell and
-- an end with no open spell are dropped (summary.sql counts them).
marks_ordered AS (
    SELECT
        *,
        LAG(mark) OVER (
            PARTITION BY customer_id ORDER BY event_time, mark
        ) AS prev_mark
    FROM marks
),

marks_kept AS (
    SELECT * FROM marks_ordered
    WHERE (mark = 'S' AND (prev_mark IS NULL OR prev_mark = 'T'))
       OR (mark = 'T' AND prev_mark = 'S')
),

-- Each start with the end that follows it (none: active at the as-of date).
pieces AS (
    SELECT * FROM (
        SELECT
            customer_id, event_time AS start_time, mark_date AS start_date, mark, plan, price,
            late_entry,
            LEAD(mark_date)     OVER w AS end_date,
            LEAD(cause)         OVER w AS cause,
            LEAD(cancel_reason) OVER w AS cancel_reason,
            -- kept marks alternate S T S T, so the mark before a start is the previous end
            LAG(mark_date)      OVER w AS prev_end
        FROM marks_kept
        WINDOW w AS (PARTITION BY customer_id ORDER BY event_time, mark)
    ) AS t
    WHERE mark = 'S'
),

-- A restart within $gap_days of the previous end continues that spell; otherwise a new spell begins.
pieces_numbered AS (
    SELECT
        *,
        SUM(CASE WHEN prev_end IS NULL OR date_diff('day', prev_end, start_date) >= $gap_days THEN 1 ELSE 0 END)
            OVER (PARTITION BY customer_id ORDER BY start_time ROWS UNBOUNDED PRECEDING)
            AS spell_number
    FROM pieces
),

spell_rows AS (
    SELECT
        customer_id,
        spell_number,
        FIRST_VALUE(start_date) OVER w_first AS start_date,
        FIRST_VALUE(plan)       OVER w_first AS plan,
        FIRST_VALUE(price)      OVER w_first AS price,
        FIRST_VALUE(late_entry) OVER w_first AS late_entry,
        LAST_VALUE(end_date)    OVER w_all   AS end_date,
        LAST_VALUE(cause)       OVER w_all   AS cause,
        LAST_VALUE(cancel_reason) OVER w_all AS cancel_reason,
        ROW_NUMBER() OVER w_first AS rn
    FROM pieces_numbered
    -- one sort for both: the same partition and order, the second over the whole spell
    WINDOW
        w_first AS (PARTITION BY customer_id, spell_number ORDER BY start_time),
        w_all   AS (PARTITION BY customer_id, spell_number ORDER BY start_time
                    ROWS BETWEEN UNBOUNDED PRECEDING AND UNBOUNDED FOLLOWING)
),

spells AS (
    SELECT
        s.customer_id,
        s.spell_number,
        s.start_date,
        s.end_date,
        s.end_date IS NOT NULL                      AS churned,
        s.cause,
        s.cancel_reason,
        s.late_entry,
        s.plan,
        s.price,
        c.channel,
        CASE WHEN s.late_entry THEN CAST($log_start AS DATE) ELSE s.start_date END AS entry_date,
        -- exit instant: the end of the last active day (end date, or the as-of date if active)
        CAST(COALESCE(s.end_date, CAST($as_of AS DATE)) + 1 AS DATE) AS exit_date
    FROM (SELECT * FROM spell_rows WHERE rn = 1) AS s
    LEFT JOIN customer_info AS c ON c.customer_id = s.customer_id
),

-- Tenure arithmetic, defined once for both instants (entry and exit) of every spell.
-- Months: complete calendar months from the start (anniversaries on the start's day of month,
-- clamped to month end), plus the elapsed share of the current month-step.
instants AS (
    SELECT customer_id, spell_number, start_date, plan, 'entry' AS which, entry_date AS at_date
    FROM spells
    UNION ALL
    SELECT customer_id, spell_number, start_date, plan, 'exit', exit_date
    FROM spells
    UNION ALL
    -- the end of the window: the as-of date's last moment
    SELECT customer_id, spell_number, start_date, plan, 'horizon',
           CAST(CAST($as_of AS DATE) + 1 AS DATE)
    FROM spells
),

instants_k0 AS (
    SELECT
        *,
        CAST(12 * (EXTRACT(YEAR FROM at_date) - EXTRACT(YEAR FROM start_date))
             + EXTRACT(MONTH FROM at_date) - EXTRACT(MONTH FROM start_date) AS INTEGER) AS k0
    FROM instants
),

instants_k AS (
    SELECT
        *,
        k0 - CASE WHEN CAST(start_date + to_months(k0) AS DATE) > at_date THEN 1 ELSE 0 END AS k
    FROM instants_k0
),

instants_units AS (
    SELECT
        customer_id,
        spell_number,
        which,
        CAST(date_diff('day', start_date, at_date) AS DOUBLE) AS elapsed_days,
        k + CAST(date_diff('day', CAST(start_date + to_months(k) AS DATE), at_date) AS DOUBLE)
              / CAST(date_diff('day', CAST(start_date + to_months(k) AS DATE),
                                       CAST(start_date + to_months(k + 1) AS DATE)) AS DOUBLE) AS elapsed_months,
        {period_months} AS period_months
    FROM instants_k
),

instants_in_unit AS (
    SELECT
        customer_id,
        spell_number,
        which,
        CASE '{unit}'
            WHEN 'days'    THEN elapsed_days
            WHEN 'weeks'   THEN elapsed_days / 7.0
            WHEN 'months'  THEN elapsed_months
            WHEN 'periods' THEN elapsed_months / period_months
        END AS elapsed
    FROM instants_units
),

exact AS (
    SELECT
        customer_id,
        spell_number,
        MAX(CASE WHEN which = 'entry' THEN elapsed END) AS entry_exact,
        MAX(CASE WHEN which = 'exit'  THEN elapsed END) AS exit_exact,
        MAX(CASE WHEN which = 'horizon' THEN elapsed END) AS horizon_exact
    FROM instants_in_unit
    GROUP BY customer_id, spell_number
)

SELECT
    s.customer_id,
    CAST(s.spell_number AS INTEGER)               AS spell_number,
    s.start_date,
    s.end_date,
    s.churned,
    s.cause,
    s.cancel_reason,
    s.late_entry,
    e.entry_exact,
    e.exit_exact,
    -- Only whole units of the window are counted: a churn inside the unit the as-of date cuts
    -- short is not counted (the spell is censored at the last whole unit), since customers still
    -- active in that unit cannot be counted as surviving it either.
    s.churned AND CEIL(e.exit_exact) <= FLOOR(e.horizon_exact) AS churn_counted,
    LEAST(e.exit_exact, FLOOR(e.horizon_exact))    AS counted_exit_exact,
    CAST(FLOOR(e.entry_exact) AS INTEGER)         AS entry_t,
    CAST(CASE WHEN s.churned AND CEIL(e.exit_exact) <= FLOOR(e.horizon_exact)
              THEN CEIL(e.exit_exact)
              ELSE FLOOR(LEAST(e.exit_exact, FLOOR(e.horizon_exact))) END AS INTEGER)
                                                  AS exit_t,
    strftime(s.start_date, '%Y-%m')               AS signup_month,
    CAST(EXTRACT(YEAR FROM s.start_date) AS VARCHAR) || '-Q'
        || CAST(EXTRACT(QUARTER FROM s.start_date) AS VARCHAR) AS signup_quarter,
    CAST(EXTRACT(YEAR FROM s.start_date) AS VARCHAR) AS signup_year,
    s.plan,
    s.price,
    {price_band}                                  AS price_band,
    s.channel
FROM spells AS s
JOIN exact AS e
  ON e.customer_id = s.customer_id AND e.spell_number = s.spell_number
