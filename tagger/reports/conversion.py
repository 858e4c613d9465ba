"""The line `convert` writes to stderr once a file is rewritten in another scheme. Reads the dict
of `tagger.data.convert.convert_file`.
"""

from __future__ import annotations

from typing import Any

from tagger.reports.layout import count


def format_conversion(summary: dict[str, Any]) -> str:
    """One line: how many sentences went from which scheme to which."""
    return (
        f"converted {count(summary['sentences'], 'sentence')} from {summary['source_scheme']} "
        f"to {summary['target_scheme']}"
    )
