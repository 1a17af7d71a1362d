"""Frame-order periodicity, frame inspection, pre-run warnings."""
