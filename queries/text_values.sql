-- text_values.sql: how the values of one text column read as the type churnlife needs.
-- Template slots: {relation} (the user's relation), {column} (a quoted column), {cast_type}
-- (TIMESTAMPTZ, DATE or DOUBLE: chosen by churnlife, never by the user).
-- Parameters: $offset_pattern (VARCHAR): a regular expression matching a time with a UTC offset
-- at the end ("10:00:00+02:00", "10:00Z").
WITH v AS (
    SELECT
        CAST({column} AS VARCHAR)                                   AS value,
        TRY_CAST(CAST({column} AS VARCHAR) AS {cast_type}) IS NULL  AS unreadable,
        regexp_matches(CAST({column} AS VARCHAR), $offset_pattern)  AS has_offset
    FROM {relation}
    WHERE {column} IS NOT NULL
)
SELECT
    COUNT(*)                                                      AS n_values,
    SUM(CASE WHEN unreadable THEN 1 ELSE 0 END)                   AS n_unreadable,
    MIN(CASE WHEN unreadable THEN value END)                      AS example_unreadable,
    SUM(CASE WHEN has_offset AND NOT unreadable THEN 1 ELSE 0 END) AS n_with_offset,
    SUM(CASE WHEN NOT has_offset AND NOT unreadable THEN 1 ELSE 0 END) AS n_without_offset,
    MIN(CASE WHEN has_offset AND NOT unreadable THEN value END)   AS example_with_offset,
    MIN(CASE WHEN NOT has_offset AND NOT unreadable THEN value END) AS example_without_offset
FROM v
