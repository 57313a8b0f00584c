"""Tables built from measured results, and their writing to files."""
