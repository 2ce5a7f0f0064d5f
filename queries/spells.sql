-- spells.sql: one row per customer subscription spell, from the boundary marks of the event log
-- (queries/marks.sql: starts, cancels, unrecovered failed payments, late entrants).
--
-- Parameters
--   $log_start, $as_of        DATE   the window: the log's first day, and the censoring date
--   $gap_days                 INT    a restart less than this many days after an end continues the spell
-- Template slots
--   {marks}              the boundary marks queries/marks.sql staged from the same log
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

-- Keep the first mark of each run: S S T T S T -> S T S T. A second start inside an open spell and
-- an end with no open spell are dropped (quality.sql counts them).
marks_kept AS (
    SELECT * FROM {marks}
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
        CAST(COALESCE(s.end_date, CAST($as_of AS DATE)) + 1 AS DATE) AS exit_date,
        -- the end of the window: the as-of date's last moment
        CAST(CAST($as_of AS DATE) + 1 AS DATE) AS horizon_date
    FROM (SELECT * FROM spell_rows WHERE rn = 1) AS s
    LEFT JOIN customer_info AS c ON c.customer_id = s.customer_id
),

-- Tenure arithmetic at the three instants of every spell: entry, exit, and the end of the window
-- (the as-of date's last moment), one column each (the same expression three times: a spell read
-- once, not a union of its instants that would materialise the spells and group them again).
-- Months: complete calendar months from the start (anniversaries on the start's day of month,
-- clamped to month end), plus the elapsed share of the current month-step.
spells_k0 AS (
    SELECT
        *,
        CAST(12 * (EXTRACT(YEAR FROM entry_date) - EXTRACT(YEAR FROM start_date))
             + EXTRACT(MONTH FROM entry_date) - EXTRACT(MONTH FROM start_date) AS INTEGER) AS k0_entry,
        CAST(12 * (EXTRACT(YEAR FROM exit_date) - EXTRACT(YEAR FROM start_date))
             + EXTRACT(MONTH FROM exit_date) - EXTRACT(MONTH FROM start_date) AS INTEGER) AS k0_exit,
        CAST(12 * (EXTRACT(YEAR FROM horizon_date) - EXTRACT(YEAR FROM start_date))
             + EXTRACT(MONTH FROM horizon_date) - EXTRACT(MONTH FROM start_date) AS INTEGER) AS k0_horizon
    FROM spells
),

spells_k AS (
    SELECT
        *,
        k0_entry - CASE WHEN CAST(start_date + to_months(k0_entry) AS DATE) > entry_date THEN 1 ELSE 0 END
            AS k_entry,
        k0_exit - CASE WHEN CAST(start_date + to_months(k0_exit) AS DATE) > exit_date THEN 1 ELSE 0 END
            AS k_exit,
        k0_horizon - CASE WHEN CAST(start_date + to_months(k0_horizon) AS DATE) > horizon_date THEN 1 ELSE 0 END
            AS k_horizon
    FROM spells_k0
),

spells_units AS (
    SELECT
        *,
        CAST(date_diff('day', start_date, entry_date) AS DOUBLE) AS days_entry,
        k_entry + CAST(date_diff('day', CAST(start_date + to_months(k_entry) AS DATE), entry_date) AS DOUBLE)
              / CAST(date_diff('day', CAST(start_date + to_months(k_entry) AS DATE),
                                       CAST(start_date + to_months(k_entry + 1) AS DATE)) AS DOUBLE) AS months_entry,
        CAST(date_diff('day', start_date, exit_date) AS DOUBLE) AS days_exit,
        k_exit + CAST(date_diff('day', CAST(start_date + to_months(k_exit) AS DATE), exit_date) AS DOUBLE)
              / CAST(date_diff('day', CAST(start_date + to_months(k_exit) AS DATE),
                                       CAST(start_date + to_months(k_exit + 1) AS DATE)) AS DOUBLE) AS months_exit,
        CAST(date_diff('day', start_date, horizon_date) AS DOUBLE) AS days_horizon,
        k_horizon + CAST(date_diff('day', CAST(start_date + to_months(k_horizon) AS DATE), horizon_date) AS DOUBLE)
              / CAST(date_diff('day', CAST(start_date + to_months(k_horizon) AS DATE),
                                       CAST(start_date + to_months(k_horizon + 1) AS DATE)) AS DOUBLE) AS months_horizon,
        {period_months} AS period_months
    FROM spells_k
),

exact AS (
    SELECT
        *,
        CASE '{unit}'
            WHEN 'days'    THEN days_entry
            WHEN 'weeks'   THEN days_entry / 7.0
            WHEN 'months'  THEN months_entry
            WHEN 'periods' THEN months_entry / period_months
        END AS entry_exact,
        CASE '{unit}'
            WHEN 'days'    THEN days_exit
            WHEN 'weeks'   THEN days_exit / 7.0
            WHEN 'months'  THEN months_exit
            WHEN 'periods' THEN months_exit / period_months
        END AS exit_exact,
        CASE '{unit}'
            WHEN 'days'    THEN days_horizon
            WHEN 'weeks'   THEN days_horizon / 7.0
            WHEN 'months'  THEN months_horizon
            WHEN 'periods' THEN months_horizon / period_months
        END AS horizon_exact
    FROM spells_units
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
    s.entry_exact,
    s.exit_exact,
    -- Only whole units of the window are counted: a churn inside the unit the as-of date cuts
    -- short is not counted (the spell is censored at the last whole unit), since customers still
    -- active in that unit cannot be counted as surviving it either.
    s.churned AND CEIL(s.exit_exact) <= FLOOR(s.horizon_exact) AS churn_counted,
    LEAST(s.exit_exact, FLOOR(s.horizon_exact))    AS counted_exit_exact,
    CAST(FLOOR(s.entry_exact) AS INTEGER)         AS entry_t,
    CAST(CASE WHEN s.churned AND CEIL(s.exit_exact) <= FLOOR(s.horizon_exact)
              THEN CEIL(s.exit_exact)
              ELSE FLOOR(LEAST(s.exit_exact, FLOOR(s.horizon_exact))) END AS INTEGER)
                                                  AS exit_t,
    strftime(s.start_date, '%Y-%m')               AS signup_month,
    CAST(EXTRACT(YEAR FROM s.start_date) AS VARCHAR) || '-Q'
        || CAST(EXTRACT(QUARTER FROM s.start_date) AS VARCHAR) AS signup_quarter,
    CAST(EXTRACT(YEAR FROM s.start_date) AS VARCHAR) AS signup_year,
    s.plan,
    s.price,
    {price_band}                                  AS price_band,
    s.channel
FROM exact AS s
