-- incomplete_rows.sql: rows of the user's events table that lack a customer id, an event time or an
-- event kind (the run stops on them unless [rules] incomplete_rows = "drop"), and the table's size.
-- Template slots: {events} (the user's relation), {customer_id}, {event_time}, {event_kind}
-- (quoted columns).
SELECT
    COUNT(*)                          AS n_rows,
    COUNT(*) - COUNT({customer_id})   AS n_null_customer,
    COUNT(*) - COUNT({event_time})    AS n_null_time,
    COUNT(*) - COUNT({event_kind})    AS n_null_kind,
    SUM(CASE WHEN {customer_id} IS NULL OR {event_time} IS NULL OR {event_kind} IS NULL
             THEN 1 ELSE 0 END)       AS n_incomplete
FROM {events}
