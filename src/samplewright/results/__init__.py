"""The run result: tables, reading a run folder back."""
