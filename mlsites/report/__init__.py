"""The run report: one self-contained HTML file a heritage officer can read."""
