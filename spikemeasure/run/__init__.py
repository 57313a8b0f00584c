"""Running measurements over many recordings."""
