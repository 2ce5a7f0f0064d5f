-- window_rows.sql: where the log's events fall against the analysis window.
-- Template slot: {events_normalised} (queries/events_normalised.sql). Parameters: $log_start, $as_of.
SELECT
    COUNT(*)        AS n_distinct,
    SUM(CASE WHEN event_time >= CAST($log_start AS TIMESTAMP)
              AND event_time < CAST($as_of AS TIMESTAMP) + INTERVAL 1 DAY
             THEN 1 ELSE 0 END) AS n_in_window,
    MIN(event_time) AS first_event,
    MAX(event_time) AS last_event
FROM ({events_normalised}) AS e
WHERE customer_id IS NOT NULL AND event_time IS NOT NULL
