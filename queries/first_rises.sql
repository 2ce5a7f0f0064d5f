-- first_rises.sql: each spell's first price increase: the first day inside the spell on which a
-- price_change sets a price above the spell's starting price, and the new price that day (the
-- lowest, if the day has several changes). One row per spell with an increase. Read by
-- episodes.sql (to split spells there) and price_rises.sql (to size the increases).
--
-- Parameters
--   $log_start, $as_of        DATE           the window (events outside it are ignored)
--   $price_change_codes       LIST<VARCHAR>  event kinds that change the price
-- Template slots
--   {spells}             the staged spells relation (queries/spells.sql)
--   {events_normalised}  queries/events_normalised.sql (user's columns renamed to roles)
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
)

SELECT f.customer_id, f.spell_number, f.change_date, MIN(r.new_price) AS new_price
FROM first_rise AS f
JOIN rises AS r ON r.customer_id = f.customer_id AND r.change_date = f.change_date
GROUP BY f.customer_id, f.spell_number, f.change_date
