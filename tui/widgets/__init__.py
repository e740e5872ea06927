"""foldsift."""
