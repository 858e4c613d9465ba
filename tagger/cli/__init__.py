"""The `tagger` command: parses options, calls library functions, turns errors into exit codes.

stdout carries data only (tables, JSON); notes and progress go to stderr.
Exit codes: 0 success, 1 a problem with the data, config, model or an output (one clear line),
2 bad usage, 3 `check` found data unfit to train or score on, 130 stopped by Ctrl-C, 141 the
reader closed standard output early, 143 stopped by SIGTERM (but `serve`, which runs until
stopped, exits 0 once a signal has stopped it and its requests in flight are answered).

Each module registers its commands on the one app; none imports torch at import time, so
`tagger check` and `tagger score` start fast.
"""

from tagger.cli import (  # noqa: F401  (registers the commands)
    annotation,
    files,
    model,
    serve,
    tagging,
    unannotated,
)
from tagger.cli.common import app

__all__ = ["app"]
