"""SQL files for the extract (installed as churnlife.queries)."""
