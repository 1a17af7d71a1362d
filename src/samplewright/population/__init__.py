"""The frame: arrays per role, exact truths, synthetic frames, frame errors, file reading."""
