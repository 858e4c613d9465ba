"""Shared test settings: hypothesis runs derandomised and keeps its files out of the checkout;
the `load_script` fixture imports a benchmark script from scripts/ for the tests that check one."""

from __future__ import annotations

import importlib.util
import sys
import tempfile
from pathlib import Path
from types import ModuleType

import pytest
from hypothesis import configuration, settings

configuration.set_hypothesis_home_dir(tempfile.mkdtemp(prefix="tagger-hypothesis-"))
settings.register_profile("tagger", database=None, derandomize=True, deadline=None)
settings.load_profile("tagger")


SCRIPTS = Path(__file__).resolve().parents[1] / "scripts"


@pytest.fixture(scope="session")
def load_script():
    """load_script(NAME) gives the module of scripts/NAME.py (the scripts import each other by
    name, so scripts/ goes on the path)."""

    def load(name: str) -> ModuleType:
        if str(SCRIPTS) not in sys.path:
            sys.path.insert(0, str(SCRIPTS))
        spec = importlib.util.spec_from_file_location(name, SCRIPTS / f"{name}.py")
        module = importlib.util.module_from_spec(spec)
        # Registered before it runs, as an import would: dataclasses look their module up there.
        sys.modules[name] = module
        spec.loader.exec_module(module)
        return module

    return load
