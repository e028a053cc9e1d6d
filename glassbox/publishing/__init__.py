"""Documents and exports for people and other systems: the audit report, pictures, terminal views,
monitoring files and pages, SQL and PMML."""
