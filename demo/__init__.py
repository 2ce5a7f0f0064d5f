"""Demo business generator (installed as churnlife.demo)."""
