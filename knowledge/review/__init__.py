"""Worklist review: many orders checked in one go (columns from the case model, results per row)."""
