"""Using a frozen model: scoring a later batch and rescoring one record."""
