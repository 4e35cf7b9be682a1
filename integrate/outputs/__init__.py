"""Writing results: tables (atomic) and the HTML run report."""
