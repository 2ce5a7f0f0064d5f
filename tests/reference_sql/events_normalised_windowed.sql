-- The user's event table, renamed to churnlife's roles.
-- Template slots ({...}) are identifiers that config.py validated and source.py quoted; values are
-- bound parameters ($name). Exact duplicate rows are dropped here (counted in summary.sql).
-- Times go through TIMESTAMPTZ so that time-zone-aware values, and text carrying a UTC offset, are
-- read in UTC (the session's time zone is UTC); plain timestamps and dates are unchanged by this.
SELECT DISTINCT
    {customer_id}                  AS customer_id,
    CAST(CAST({event_time} AS TIMESTAMPTZ) AS TIMESTAMP) AS event_time,
    CAST({event_kind} AS VARCHAR)  AS event_kind,
    CAST({plan} AS VARCHAR)        AS plan,
    CAST({price} AS DOUBLE)        AS price,
    CAST({cancel_reason} AS VARCHAR) AS cancel_reason,
    CAST({signup_date} AS DATE)    AS signup_date_on_event,
    CAST({channel} AS VARCHAR)     AS channel_on_event
FROM {events}
