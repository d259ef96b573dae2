"""The run: planning, region preparation, chunk tasks, checkpoints, restarts, execution."""
