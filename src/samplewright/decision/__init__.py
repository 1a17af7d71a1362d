"""Cost-precision frontier, recommendation, sample-size planning."""
