-- summary.sql: the data summary and anomaly counts shown in the report.
-- Template slots: {events} (the user's table), {events_normalised}, {spells} (spells relation),
-- {customer_events} (the per-customer pass queries/customer_events.sql staged: one row per customer
-- with an event inside the window), {customer_id}, {event_time} (quoted columns).
-- Parameters: $log_start, $as_of (DATE).
WITH
all_rows AS (
    SELECT
        COUNT(*) AS n_rows,
        SUM(CASE WHEN {customer_id} IS NULL THEN 1 ELSE 0 END) AS n_null_customer,
        SUM(CASE WHEN {event_time} IS NULL THEN 1 ELSE 0 END)  AS n_null_time
    FROM {events}
),
-- Every row, duplicates included (the first and last event and the customers do not depend on them).
every_row AS (
    SELECT
        COUNT(*) AS n_events,
        SUM(CASE WHEN event_time < CAST($log_start AS TIMESTAMP) THEN 1 ELSE 0 END) AS n_before_log,
        SUM(CASE WHEN event_time >= CAST($as_of AS TIMESTAMP) + INTERVAL 1 DAY THEN 1 ELSE 0 END)
            AS n_after_as_of,
        MIN(event_time) AS first_event,
        MAX(event_time) AS last_event
    FROM ({events_normalised}) AS t
),
-- The customers with an event inside the window: counted from the staged per-customer rows, not
-- by a DISTINCT over every event.
in_window AS (
    SELECT COUNT(*) AS n_customers_in_window FROM {customer_events}
),
-- Exact duplicate rows (events_normalised.sql keeps them) share the customer and the instant, so
-- only the rows at an instant the customer has more than one event at are compared column by
-- column: a hash of two columns over every event instead of a DISTINCT over all of them.
repeated_instants AS (
    SELECT customer_id, event_time
    FROM ({events_normalised}) AS t
    GROUP BY customer_id, event_time
    HAVING COUNT(*) > 1
),
shared AS (
    SELECT t.*
    FROM ({events_normalised}) AS t
    JOIN repeated_instants AS r
      ON r.customer_id IS NOT DISTINCT FROM t.customer_id
     AND r.event_time IS NOT DISTINCT FROM t.event_time
),
-- Rows beyond the first copy of each distinct row: those rows, less one per distinct row.
extra_copies AS (
    SELECT
        COALESCE(SUM(copy), 0) AS n_extra,
        COALESCE(SUM(CASE WHEN event_time < CAST($log_start AS TIMESTAMP) THEN copy ELSE 0 END), 0)
            AS n_extra_before_log,
        COALESCE(SUM(CASE WHEN event_time >= CAST($as_of AS TIMESTAMP) + INTERVAL 1 DAY
                          THEN copy ELSE 0 END), 0) AS n_extra_after_as_of
    FROM (
        SELECT event_time, 1 AS copy FROM shared
        UNION ALL
        SELECT event_time, -1 FROM (SELECT DISTINCT * FROM shared) AS d
    ) AS u
),
-- The counts of distinct rows (each exact duplicate counted once).
distinct_rows AS (
    SELECT
        CAST(e.n_events - x.n_extra AS BIGINT)                       AS n_distinct,
        CAST(e.n_before_log - x.n_extra_before_log AS BIGINT)        AS n_before_log,
        CAST(e.n_after_as_of - x.n_extra_after_as_of AS BIGINT)      AS n_after_as_of,
        w.n_customers_in_window,
        e.first_event,
        e.last_event
    FROM every_row AS e, extra_copies AS x, in_window AS w
),
spell_stats AS (
    SELECT
        COUNT(*)                                        AS n_spells,
        COUNT(DISTINCT customer_id)                     AS n_customers_with_spells,
        SUM(CASE WHEN late_entry THEN 1 ELSE 0 END)     AS n_late_entry,
        SUM(CASE WHEN churned THEN 0 ELSE 1 END)        AS n_censored,
        SUM(CASE WHEN cause = 'voluntary' THEN 1 ELSE 0 END)   AS n_voluntary,
        SUM(CASE WHEN cause = 'involuntary' THEN 1 ELSE 0 END) AS n_involuntary,
        SUM(CASE WHEN spell_number > 1 THEN 1 ELSE 0 END) AS n_repeat_spells,
        MAX(exit_t)                                     AS max_tenure
    FROM {spells}
)
SELECT * FROM all_rows, distinct_rows, spell_stats
