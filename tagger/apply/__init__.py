"""Applying a trained model: the `Tagger` object (load, save, predict), batch tagging of
documents, and evaluation of a model on gold files.

May import `tagger.network` and everything below it; never `tagger.training` or the CLI.
"""
