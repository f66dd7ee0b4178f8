"""What was read on the bench: readings files, instrument accuracy, derived readings."""
