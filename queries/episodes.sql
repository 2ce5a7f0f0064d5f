-- episodes.sql: the staged spells split at each spell's first price increase, for hazard models
-- with a time-varying price covariate ("after a price increase"). One row per piece of a spell,
-- shaped like a spell row so queries/counts.sql can count the pieces per cohort × price_state ×
-- tenure.
--
-- Parameters
--   $log_start, $as_of        DATE           the window (events outside it are ignored)
--   $price_change_codes       LIST<VARCHAR>  event kinds that change the price
-- Template slots
--   {spells}             the staged spells relation (queries/spells.sql)
--   {first_rises}        queries/first_rises.sql (each spell's first increase)
--   {period_months}      SQL expression: billing period length in months of column `plan`
--   {unit}               'days' | 'weeks' | 'months' | 'periods' (a literal chosen by churnlife)
--
-- A price change takes effect at the start of its day. The first change inside a spell to a price
-- above the spell's starting price splits it at that instant c (tenure units, the calendar rules of
-- spells.sql): the piece before is censored at floor(c) (the units it completed before the change),
-- the piece after enters at floor(c) and ends as the spell ends. A spell whose counted time ends
-- before the change is one piece "before increase".
WITH
first_rise AS (
    {first_rises}
),

-- The change instant in tenure units: complete calendar months from the start plus the elapsed
-- share of the current month-step (as spells.sql), or days / 7, or months / period length.
rise_k0 AS (
    SELECT
        f.customer_id, f.spell_number, f.change_date, s.start_date, s.plan,
        CAST(12 * (EXTRACT(YEAR FROM f.change_date) - EXTRACT(YEAR FROM s.start_date))
             + EXTRACT(MONTH FROM f.change_date) - EXTRACT(MONTH FROM s.start_date) AS INTEGER)
            AS k0
    FROM first_rise AS f
    JOIN {spells} AS s ON s.customer_id = f.customer_id AND s.spell_number = f.spell_number
),

rise_k AS (
    SELECT
        *,
        k0 - CASE WHEN CAST(start_date + to_months(k0) AS DATE) > change_date THEN 1 ELSE 0 END
            AS k
    FROM rise_k0
),

rise_at AS (
    SELECT
        customer_id,
        spell_number,
        CASE '{unit}'
            WHEN 'days'  THEN CAST(date_diff('day', start_date, change_date) AS DOUBLE)
            WHEN 'weeks' THEN CAST(date_diff('day', start_date, change_date) AS DOUBLE) / 7.0
            ELSE (k + CAST(date_diff('day', CAST(start_date + to_months(k) AS DATE), change_date) AS DOUBLE)
                      / CAST(date_diff('day', CAST(start_date + to_months(k) AS DATE),
                                       CAST(start_date + to_months(k + 1) AS DATE)) AS DOUBLE))
                 / CASE '{unit}' WHEN 'periods' THEN {period_months} ELSE 1.0 END
        END AS c
    FROM rise_k
),

spells_c AS (
    SELECT s.*, r.c
    FROM {spells} AS s
    LEFT JOIN rise_at AS r ON r.customer_id = s.customer_id AND r.spell_number = s.spell_number
)

-- whole spells: no increase inside their counted time
SELECT
    signup_month, signup_quarter, signup_year, plan, price_band, channel,
    'before increase' AS price_state,
    entry_t, exit_t, churn_counted, cause, entry_exact, counted_exit_exact
FROM spells_c
WHERE c IS NULL OR c >= counted_exit_exact
UNION ALL
-- the part before the increase: censored at the units completed before it
SELECT
    signup_month, signup_quarter, signup_year, plan, price_band, channel,
    'before increase',
    entry_t, CAST(FLOOR(c) AS INTEGER), FALSE, CAST(NULL AS VARCHAR), entry_exact, c
FROM spells_c
WHERE c IS NOT NULL AND c < counted_exit_exact AND c > entry_exact
UNION ALL
-- the part after the increase: enters at floor(c), ends as the spell does
SELECT
    signup_month, signup_quarter, signup_year, plan, price_band, channel,
    'after increase',
    CAST(FLOOR(GREATEST(c, entry_exact)) AS INTEGER), exit_t, churn_counted, cause,
    GREATEST(c, entry_exact), counted_exit_exact
FROM spells_c
WHERE c IS NOT NULL AND c < counted_exit_exact
