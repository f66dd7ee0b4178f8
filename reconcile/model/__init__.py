"""The board as drawn: value strings, the board file and its loader, E-series tables."""
