"""Everything a person sees: rich tables, matplotlib figures, the HTML report."""
