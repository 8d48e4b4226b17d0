"""Exports: RFC 4180 CSV files (vertices, fitted equations, period summaries, the audit trail) and ZIP bundles."""
