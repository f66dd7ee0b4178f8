"""Which fault best explains the readings: hypotheses, their fits and their scores."""
