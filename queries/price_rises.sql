-- price_rises.sql: how large the observed price increases were, per cohort: for each spell's
-- first increase (a price_change to a price above the spell's starting price, inside the spell),
-- the ratio new price / starting price. Used to turn the hazard ratio after an increase into an
-- elasticity per 1 % of price.
--
-- Parameters
--   $log_start, $as_of        DATE           the window
--   $price_change_codes       LIST<VARCHAR>  event kinds that change the price
-- Template slots
--   {spells}, {events_normalised}, {cohort_cols}, {cohort_names}, {cohort_label}
WITH
raw_events AS (
    {events_normalised}
),

rises AS (
    SELECT customer_id, CAST(event_time AS DATE) AS change_date, price AS new_price
    FROM raw_events
    WHERE list_contains($price_change_codes, event_kind)
      AND event_time >= CAST($log_start AS TIMESTAMP)
      AND event_time < CAST($as_of AS TIMESTAMP) + INTERVAL 1 DAY
      AND price IS NOT NULL
),

first_rise AS (
    SELECT s.customer_id, s.spell_number, MIN(r.change_date) AS change_date
    FROM {spells} AS s
    JOIN rises AS r
      ON r.customer_id = s.customer_id
     AND r.change_date > s.start_date
     AND r.change_date <= COALESCE(s.end_date, CAST($as_of AS DATE))
     AND r.new_price > s.price
    GROUP BY s.customer_id, s.spell_number
),

ratios AS (
    SELECT {cohort_cols}, MIN(r.new_price) / MIN(s.price) AS ratio
    FROM first_rise AS f
    JOIN {spells} AS s ON s.customer_id = f.customer_id AND s.spell_number = f.spell_number
    JOIN rises AS r ON r.customer_id = f.customer_id AND r.change_date = f.change_date
    WHERE s.price > 0
    GROUP BY {cohort_names}, s.customer_id, s.spell_number
)

SELECT
    {cohort_label} AS cohort,
    COUNT(*) AS spells_with_rise,
    AVG(LN(ratio)) AS mean_log_ratio
FROM ratios
GROUP BY {cohort_names}
ORDER BY cohort
