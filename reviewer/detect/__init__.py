"""Scoring and events: one streaming pass over a movie scores every frame and proposes candidates."""
