"""What `convert` writes to stderr once a file is rewritten in another scheme: how many sentences
went from which scheme to which, and the sentences it repaired. Reads the dict of
`tagger.data.convert.convert_file`.
"""

from __future__ import annotations

from typing import Any

from tagger.reports.layout import bullets, count


def format_conversion(summary: dict[str, Any]) -> str:
    """One line saying what was converted, then, when sentences were repaired, which."""
    head = (
        f"converted {count(summary['sentences'], 'sentence')} from {summary['source_scheme']} "
        f"to {summary['target_scheme']}"
    )
    repaired = summary.get("repaired") or {"count": 0, "examples": []}
    if not repaired["count"]:
        return head
    lines = [
        head,
        f"repaired {count(repaired['count'], 'sentence')} ill-formed in "
        f"{summary['source_scheme']}, read the lenient CoNLL way:",
    ]
    shown = [f"line {e['line']}: {e['message']}" for e in repaired["examples"]]
    lines += bullets(shown, hidden=repaired["count"] - len(shown))
    return "\n".join(lines)
