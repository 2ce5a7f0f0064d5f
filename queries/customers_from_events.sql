-- Signup date and channel carried on the event rows themselves (no customers table).
SELECT
    customer_id,
    MIN(signup_date_on_event) AS signup_date,
    MIN(channel_on_event)     AS channel
FROM raw_events
GROUP BY customer_id
