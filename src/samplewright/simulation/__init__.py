"""The run plan, the block engine and its backends, fieldwork, checkpoints, progress."""
