"""Change between two surveys: persisting, lost and new plants per plot."""
