-- summary.sql: the data summary and anomaly counts shown in the report.
-- Template slots: {events} (the user's table), {events_normalised}, {spells} (spells relation),
-- {customer_id}, {event_time} (quoted columns). Parameters: $log_start, $as_of (DATE).
WITH
raw_events AS (
    {events_normalised}
),
all_rows AS (
    SELECT
        COUNT(*) AS n_rows,
        SUM(CASE WHEN {customer_id} IS NULL THEN 1 ELSE 0 END) AS n_null_customer,
        SUM(CASE WHEN {event_time} IS NULL THEN 1 ELSE 0 END)  AS n_null_time
    FROM {events}
),
distinct_rows AS (
    SELECT
        COUNT(*) AS n_distinct,
        SUM(CASE WHEN event_time < CAST($log_start AS TIMESTAMP) THEN 1 ELSE 0 END) AS n_before_log,
        SUM(CASE WHEN event_time >= CAST($as_of AS TIMESTAMP) + INTERVAL 1 DAY THEN 1 ELSE 0 END)
            AS n_after_as_of,
        COUNT(DISTINCT CASE
            WHEN event_time >= CAST($log_start AS TIMESTAMP)
             AND event_time < CAST($as_of AS TIMESTAMP) + INTERVAL 1 DAY
            THEN customer_id END) AS n_customers_in_window,
        MIN(event_time) AS first_event,
        MAX(event_time) AS last_event
    FROM raw_events
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
