"""What a person reads: the text summary, JSON, plots and maps."""
