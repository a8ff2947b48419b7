"""Seeded synthetic in-situ growth movies with ground truth (demo data and test fixtures)."""

from sample_movies.growth import (
    PRESETS,
    Scenario,
    ensure_sample,
    generate,
    iter_generate,
    write_movie,
)

__all__ = ["PRESETS", "Scenario", "ensure_sample", "generate", "iter_generate", "write_movie"]
