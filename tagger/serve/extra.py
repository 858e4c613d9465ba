"""The `serve` extra: the web framework and server the service runs on, checked before use."""

from __future__ import annotations

import importlib.util

from tagger.errors import ConfigError

PACKAGES = ("starlette", "uvicorn")


def require_serve_extra() -> None:
    """ConfigError naming what to install when the framework or the server is missing."""
    missing = [name for name in PACKAGES if importlib.util.find_spec(name) is None]
    if missing:
        raise ConfigError(
            f"serving a model needs {' and '.join(missing)}: pip install 'tagger[serve]'"
        )
