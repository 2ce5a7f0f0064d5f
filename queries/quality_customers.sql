-- quality_customers.sql: problems in the user's customers table that churnlife handles by rule.
-- Template slots: {customers} (the user's relation), {customer_id} (a quoted column).
WITH per_customer AS (
    SELECT {customer_id} AS customer_id, COUNT(*) AS n
    FROM {customers}
    WHERE {customer_id} IS NOT NULL
    GROUP BY {customer_id}
)
SELECT
    (SELECT COUNT(*) FROM per_customer WHERE n > 1)                    AS n_customers_listed_twice,
    (SELECT COUNT(*) FROM {customers} WHERE {customer_id} IS NULL)     AS n_customer_rows_no_id
