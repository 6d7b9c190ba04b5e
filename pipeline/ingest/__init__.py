"""Ingest stage: raw batches -> normalised observations in the store, or quarantine."""
