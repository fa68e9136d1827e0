"""The self-contained HTML report, built from a run folder."""
