"""Report sections: one module per stage's part of the report, each turning results into a
``churnlife.report.Section``. The pipeline decides the order."""
