"""The annotation store: the journal of review decisions, sessions, and the CSV event table."""
