"""Readers for the programme folder: one declared column spec per file (spec.py)."""
