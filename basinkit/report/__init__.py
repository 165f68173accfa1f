"""The report room: the self-contained HTML report, built from what the workflow steps
wrote."""
