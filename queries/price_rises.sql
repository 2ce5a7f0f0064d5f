-- price_rises.sql: how large the observed price increases were, per cohort: for each spell's
-- first increase (a price_change to a price above the spell's starting price, inside the spell),
-- the ratio new price / starting price. Used to turn the hazard ratio after an increase into an
-- elasticity per 1 % of price.
--
-- Parameters
--   $log_start, $as_of        DATE           the window
--   $price_change_codes       LIST<VARCHAR>  event kinds that change the price
-- Template slots
--   {spells}, {first_rises} (queries/first_rises.sql), {cohort_cols}, {cohort_names},
--   {cohort_label}
WITH
ratios AS (
    SELECT {cohort_cols}, f.new_price / s.price AS ratio
    FROM ({first_rises}) AS f
    JOIN {spells} AS s ON s.customer_id = f.customer_id AND s.spell_number = f.spell_number
    WHERE s.price > 0
)

SELECT
    {cohort_label} AS cohort,
    COUNT(*) AS spells_with_rise,
    AVG(LN(ratio)) AS mean_log_ratio
FROM ratios
GROUP BY {cohort_names}
ORDER BY cohort
