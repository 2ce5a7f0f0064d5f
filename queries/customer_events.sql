-- customer_events.sql: one row per customer with an event inside the window, formed once from the
-- event log and staged; marks.sql, summary.sql and quality.sql read it ({customer_events} there)
-- instead of each grouping every event by customer again.
--
-- Parameters: $log_start, $as_of (DATE), $start_codes and $role_codes (every code with a role: all
-- but those listed under ignore) (LIST<VARCHAR>).
-- Template slot: {events_normalised}  queries/events_normalised.sql (user's columns renamed to roles)
--
-- Columns: customer_id (never NULL); first_time, the customer's first event with a role inside the
-- window (NULL when every event of theirs in the window has a code listed under ignore); and
-- first_start, their first start inside the window (NULL when none). Events after the as-of date
-- and before the log's start are not read. Exact duplicate rows change none of these.
SELECT
    customer_id,
    MIN(CASE WHEN list_contains($role_codes, event_kind) THEN event_time END)  AS first_time,
    MIN(CASE WHEN list_contains($start_codes, event_kind) THEN event_time END) AS first_start
FROM ({events_normalised}) AS raw
WHERE event_time >= CAST($log_start AS TIMESTAMP)
  AND event_time < CAST($as_of AS TIMESTAMP) + INTERVAL 1 DAY
  AND customer_id IS NOT NULL
GROUP BY customer_id
