"""Bundled demo inputs (installed as ``stellar_match.bundled_tables``); see README.md here."""
