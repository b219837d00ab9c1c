"""Plan files, safety limits, the runner, the run folder and its events."""
