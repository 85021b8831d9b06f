"""Reports: plots (PNG), tables (CSV), results (JSON) and text summaries."""
