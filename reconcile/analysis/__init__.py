"""What a fit means: the error budget and the next most useful reading."""
