"""Scores: span counts, precision/recall/F1 per type, and the scoring of two column files.

May import `tagger.data`; never torch, so `tagger score` needs no network code.
"""
