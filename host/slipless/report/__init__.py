"""The self-contained HTML run report and its figures."""
