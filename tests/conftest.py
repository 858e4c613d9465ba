"""Shared test settings: hypothesis runs derandomised and keeps its files out of the checkout."""

from __future__ import annotations

import tempfile

from hypothesis import configuration, settings

configuration.set_hypothesis_home_dir(tempfile.mkdtemp(prefix="tagger-hypothesis-"))
settings.register_profile("tagger", database=None, derandomize=True, deadline=None)
settings.load_profile("tagger")
