-- marks.sql: the spell boundary marks of every customer, formed once from the event log and staged;
-- spells.sql turns them into spells and quality.sql counts what their rules drop ({marks} there).
--
-- Parameters: $log_start, $as_of (DATE), $grace_days (INT), $start_codes, $cancel_codes,
-- $payment_failed_codes, $renewal_codes, $payment_recovered_codes and $role_codes (every code
-- with a role: all but those listed under ignore) (LIST<VARCHAR>).
-- Template slots
--   {events_normalised}  queries/events_normalised.sql (user's columns renamed to roles)
--   {customer_info}      queries/customers_from_table.sql or customers_from_events.sql
--   {customer_events}    the per-customer first events queries/customer_events.sql staged
--
-- One row per mark: S = a start, T = an end (a cancel, or a failed payment that was not recovered
-- within the grace period and whose grace period is over by the as-of date), with the mark before
-- it in the customer's order of marks (prev_mark: NULL for the first). Columns: customer_id,
-- event_time, mark_date, mark, plan, price, cause ('voluntary' | 'involuntary' | NULL),
-- cancel_reason, late_entry, prev_mark. Exact duplicate event rows give one mark (the run rule in
-- spells.sql drops a repeated mark anyway; quality.sql counts distinct events only).
WITH
raw_events AS (
    {events_normalised}
),

customer_info AS (
    {customer_info}
),

-- The events that can be a mark (starts, cancels, failed payments) inside the window, each
-- distinct event row once. Events after the as-of date are ignored. Every CTE below reads the log
-- in its own scan, filtered on the codes it needs: a CTE read twice is materialised, a copy of
-- every event (benchmarks/RESULTS.md).
ev_marks AS (
    SELECT DISTINCT
        *,
        CAST(event_time AS DATE) AS event_date,
        CASE
            WHEN list_contains($start_codes, event_kind)  THEN 'start'
            WHEN list_contains($cancel_codes, event_kind) THEN 'cancel'
            ELSE 'payment_failed'
        END AS role
    FROM ({events_normalised}) AS raw
    WHERE event_time >= CAST($log_start AS TIMESTAMP)
      AND event_time < CAST($as_of AS TIMESTAMP) + INTERVAL 1 DAY
      AND customer_id IS NOT NULL
      AND (list_contains($start_codes, event_kind)
           OR list_contains($cancel_codes, event_kind)
           OR list_contains($payment_failed_codes, event_kind))
),

-- Payments that went through (a recovery or a renewal).
paid AS (
    SELECT customer_id, event_time, CAST(event_time AS DATE) AS event_date
    FROM ({events_normalised}) AS raw
    WHERE event_time >= CAST($log_start AS TIMESTAMP)
      AND event_time < CAST($as_of AS TIMESTAMP) + INTERVAL 1 DAY
      AND customer_id IS NOT NULL
      AND (list_contains($renewal_codes, event_kind)
           OR list_contains($payment_recovered_codes, event_kind))
),

-- Failed payments not recovered within the grace period: no later payment went through by the
-- failure's date + $grace_days. A join on the customer, not a window over every event of the
-- log: failures are few, and only they need the look-ahead.
unrecovered AS (
    SELECT f.customer_id, f.event_time, f.event_date, f.plan, f.price
    FROM ev_marks AS f
    WHERE f.role = 'payment_failed'
      AND f.event_date + $grace_days <= $as_of
      AND NOT EXISTS (
          SELECT 1
          FROM paid AS ok
          WHERE ok.customer_id = f.customer_id
            AND ok.event_time > f.event_time
            AND ok.event_date <= f.event_date + $grace_days
      )
),

-- Customers who began before the log and are still active when it starts: their first event in the
-- log (of any role; codes listed under ignore have none) is not a start. They enter late, at their
-- known signup date. The first event per customer is found once, by its time, in the staged
-- {customer_events} (an aggregate, not a sort of every event); when several events share that
-- first instant, a start among them counts as the first event, else the smallest plan and price.
late_entrants AS (
    SELECT t.customer_id, t.first_time, c.signup_date
    FROM {customer_events} AS t
    JOIN customer_info AS c ON c.customer_id = t.customer_id
    WHERE c.signup_date < $log_start
      AND t.first_time IS NOT NULL
      AND (t.first_start IS NULL OR t.first_start > t.first_time)
),

-- Their plan and price: of the events at that first instant.
first_in_log AS (
    SELECT l.customer_id, l.signup_date, MIN(e.plan) AS plan, MIN(e.price) AS price
    FROM ({events_normalised}) AS e
    JOIN late_entrants AS l
      ON l.customer_id = e.customer_id AND l.first_time = e.event_time
    WHERE list_contains($role_codes, e.event_kind)
    GROUP BY l.customer_id, l.signup_date
),

marks AS (
    SELECT customer_id, event_time, event_date AS mark_date, 'S' AS mark, plan, price,
           CAST(NULL AS VARCHAR) AS cause, CAST(NULL AS VARCHAR) AS cancel_reason,
           FALSE AS late_entry
    FROM ev_marks WHERE role = 'start'
    UNION ALL
    SELECT customer_id, event_time, event_date, 'T', plan, price,
           'voluntary', cancel_reason, FALSE
    FROM ev_marks WHERE role = 'cancel'
    UNION ALL
    SELECT customer_id, event_time, event_date, 'T', plan, price,
           'involuntary', CAST(NULL AS VARCHAR), FALSE
    FROM unrecovered
    UNION ALL
    SELECT customer_id, CAST(signup_date AS TIMESTAMP), signup_date, 'S', plan, price,
           CAST(NULL AS VARCHAR), CAST(NULL AS VARCHAR), TRUE
    FROM first_in_log
)

-- The mark before each (the run rule in spells.sql keeps the first mark of each run).
SELECT
    *,
    LAG(mark) OVER (PARTITION BY customer_id ORDER BY event_time, mark) AS prev_mark
FROM marks
