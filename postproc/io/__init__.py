"""Readers of postproc's inputs (results tables, configs)."""
