-- Signup date and channel from the user's customers table (one row per customer expected;
-- if a customer appears twice the earliest signup date and first channel are kept).
SELECT
    {customer_id}                 AS customer_id,
    MIN(CAST({signup_date} AS DATE)) AS signup_date,
    MIN(CAST({channel} AS VARCHAR))  AS channel
FROM {customers}
GROUP BY {customer_id}
