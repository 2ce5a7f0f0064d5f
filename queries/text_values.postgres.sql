-- text_values.postgres.sql: queries/text_values.sql for PostgreSQL, which has no TRY_CAST (and,
-- before version 16, no pg_input_is_valid). A value is taken as readable when it has the shape
-- of an ISO 8601 time, a date or a plain number; a value of the right shape that still does not
-- read (say 2024-02-30) stops the run later, when the extract casts it, with the server's
-- message. Same slots, parameters and result columns as text_values.sql.
WITH v AS (
    SELECT
        CAST({column} AS VARCHAR) AS value,
        NOT regexp_matches(
            CAST({column} AS VARCHAR),
            CASE '{cast_type}'
                WHEN 'DATE'   THEN '^\s*[0-9]{4}-[0-9]{1,2}-[0-9]{1,2}\s*$'
                WHEN 'DOUBLE' THEN '^\s*[+-]?([0-9]+([.][0-9]*)?|[.][0-9]+)([eE][+-]?[0-9]+)?\s*$'
                ELSE '^\s*[0-9]{4}-[0-9]{1,2}-[0-9]{1,2}([ T][0-9]{1,2}:[0-9]{2}(:[0-9]{2}([.][0-9]+)?)?)?\s*(Z|[+-][0-9]{2}(:?[0-9]{2})?)?\s*$'
            END
        ) AS unreadable,
        regexp_matches(CAST({column} AS VARCHAR), $offset_pattern) AS has_offset
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
