-- Event kinds in the log that the config does not map to any role (the run stops on these).
SELECT CAST({event_kind} AS VARCHAR) AS event_kind, COUNT(*) AS n_events
FROM {events}
WHERE NOT list_contains($known_codes, CAST({event_kind} AS VARCHAR))
   OR {event_kind} IS NULL
GROUP BY 1
ORDER BY 2 DESC
LIMIT 20
