-- The user's event table, renamed to churnlife's roles.
-- Template slots ({...}) are identifiers that config.py validated and source.py quoted; values are
-- bound parameters ($name). Exact duplicate rows are kept here: the spells do not depend on them
-- (a repeated start or end is the second mark of a run, dropped by spells.sql's rule), and the
-- queries that count events (summary.sql, quality.sql) drop them with DISTINCT themselves.
-- Times go through TIMESTAMPTZ ({event_time_via}) so that time-zone-aware values, and text
-- carrying a UTC offset, are read in UTC (the session's time zone is UTC); a plain timestamp or
-- date column is cast straight to TIMESTAMP ({event_time_via} = TIMESTAMP), the same value
-- without a per-row time-zone conversion.
SELECT
    {customer_id}                  AS customer_id,
    CAST(CAST({event_time} AS {event_time_via}) AS TIMESTAMP) AS event_time,
    CAST({event_kind} AS VARCHAR)  AS event_kind,
    CAST({plan} AS VARCHAR)        AS plan,
    CAST({price} AS DOUBLE)        AS price,
    CAST({cancel_reason} AS VARCHAR) AS cancel_reason,
    CAST({signup_date} AS DATE)    AS signup_date_on_event,
    CAST({channel} AS VARCHAR)     AS channel_on_event
FROM {events}
