"""churnlife: customer churn and subscription lifetime from an event log."""

__version__ = "0.1.0"
