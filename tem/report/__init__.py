"""Report stage: the HTML quality-control report of a project."""
