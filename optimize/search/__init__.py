"""The design search: the Optuna engine, its storage, design records and the robust objective."""
