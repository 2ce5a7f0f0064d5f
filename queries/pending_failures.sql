-- pending_failures.sql: failed payments and what became of them, for valuing the active base.
-- A failure is "pending" when its grace period is not over by the as-of date and no payment
-- (a recovery or a renewal) has followed it: its spell still counts as active
-- (queries/spells.sql), but it may yet end on the failure. For failures whose grace period is
-- over, "recovered" says whether a payment followed within it (the rules of spells.sql).
-- One row per cohort × tenure of the active spells holding a pending failure (kind 'pending'),
-- plus one row with the failures decided so far (kind 'decided': count and recovered).
--
-- Parameters
--   $log_start, $as_of                               DATE
--   $grace_days                                      INT
--   $payment_failed_codes, $ok_codes                 LIST<VARCHAR>  failures; recoveries and renewals
-- Template slots
--   {spells}, {events_normalised}, {cohort_cols}, {cohort_names}, {cohort_label}
WITH
raw_events AS (
    {events_normalised}
),

ev AS (
    SELECT
        customer_id,
        event_time,
        CAST(event_time AS DATE) AS event_date,
        list_contains($payment_failed_codes, event_kind) AS failed,
        list_contains($ok_codes, event_kind) AS ok
    FROM raw_events
    WHERE event_time >= CAST($log_start AS TIMESTAMP)
      AND event_time < CAST($as_of AS TIMESTAMP) + INTERVAL 1 DAY
      AND customer_id IS NOT NULL
),

failures AS (
    SELECT
        f.customer_id,
        f.event_date,
        MIN(o.event_date) AS next_ok_date
    FROM ev AS f
    LEFT JOIN ev AS o
      ON o.customer_id = f.customer_id AND o.ok AND o.event_time > f.event_time
    WHERE f.failed
    GROUP BY f.customer_id, f.event_time, f.event_date
),

decided AS (
    SELECT
        COUNT(*) AS failures,
        SUM(CASE WHEN next_ok_date IS NOT NULL AND next_ok_date <= event_date + $grace_days
                 THEN 1 ELSE 0 END) AS recovered
    FROM failures
    WHERE event_date + $grace_days <= $as_of
),

pending AS (
    SELECT DISTINCT customer_id, event_date
    FROM failures
    WHERE event_date + $grace_days > $as_of AND next_ok_date IS NULL
),

pending_spells AS (
    SELECT {cohort_cols}, s.exit_t
    FROM {spells} AS s
    JOIN (SELECT customer_id, MIN(event_date) AS event_date FROM pending GROUP BY customer_id) AS p
      ON p.customer_id = s.customer_id AND p.event_date >= s.start_date
    WHERE NOT s.churned
)

SELECT
    'pending' AS kind,
    {cohort_label} AS cohort,
    CAST(exit_t AS INTEGER) AS tenure,
    CAST(COUNT(*) AS BIGINT) AS n,
    CAST(0 AS BIGINT) AS recovered
FROM pending_spells
GROUP BY {cohort_names}, exit_t
UNION ALL
SELECT 'decided', NULL, NULL, CAST(failures AS BIGINT), CAST(recovered AS BIGINT) FROM decided
