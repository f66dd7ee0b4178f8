"""What a fit means: the miss budget and the next most useful reading."""
