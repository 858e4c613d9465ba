"""Scores: span counts, precision/recall/F1 per type, and the scoring of two column files; for
error analysis, a bootstrap interval of F1, the calibration of span scores and example sentences
of each kind of error.

May import `tagger.data`; never torch, so `tagger score` needs no network code.
"""
