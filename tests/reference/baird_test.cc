// Filled in by the issue-3 reference checks.
