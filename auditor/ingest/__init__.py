"""Ingest: readers → canonical frame → validation → one transaction (see pipeline.py)."""
