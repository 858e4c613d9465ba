"""Where a sentence picked for annotation came from: its trace line in a column file.

`tagger pick` writes each sentence it picks after a line of its own:

    -DOCSTART- picked {"rank": 1, "score": 0.8123, "file": "pool.txt", "document": "pool.txt", "at": [120, 184]}

``rank`` is the sentence's place in the ranking (1 is the one to annotate first), ``score`` its
uncertainty, ``file`` the pool input it was read from, ``document`` the id of its document there
(the file name for a plain-text file, the record's "id" for JSON Lines, "FILE:LINE" otherwise) and
``at`` its first and last-plus-one character in that document.

Why a `-DOCSTART-` line: column files have no comments unless a reader is told of them, but every
reader of the format already takes a `-DOCSTART-` line (with anything after the mark) as a
document boundary and keeps it with the sentence that follows. So the picked file is read by
`check`, `train`, `score` and any other column-file reader as it is, and the trace moves with its
sentence when the file is corrected, cut or joined to train. The cost: each picked sentence is a
document of its own. The JSON object keeps any file name or document id intact on one line.
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from tagger.data.column_lines import DOCSTART, is_docstart

MARK = "picked"  # the word after -DOCSTART- that says a trace follows
SCORE_DIGITS = 4  # scores are written rounded


@dataclass(frozen=True)
class Trace:
    """A picked sentence's place in the ranking, its uncertainty and where it lies in the pool."""

    rank: int
    score: float
    file: str
    document: Any  # str, or whatever a JSON Lines record's "id" holds
    start: int  # characters of the document before the sentence
    end: int  # end exclusive

    def line(self) -> str:
        """The trace line written before the sentence."""
        record = {
            "rank": self.rank,
            "score": round(self.score, SCORE_DIGITS),
            "file": self.file,
            "document": self.document,
            "at": [self.start, self.end],
        }
        # ensure_ascii=False keeps names readable; json escapes TABs and line breaks in strings,
        # so the trace stays one line that no column splitter cuts.
        return f"{DOCSTART} {MARK} {json.dumps(record, ensure_ascii=False)}"


def read_trace(line: str) -> Trace | None:
    """The trace a line holds; None for any other line (a plain -DOCSTART- line included)."""
    if not is_docstart(line):
        return None
    rest = line[len(DOCSTART) :].strip()
    if not rest.startswith(MARK + " "):
        return None
    try:
        record = json.loads(rest[len(MARK) :])
        start, end = record["at"]
        return Trace(
            int(record["rank"]),
            float(record["score"]),
            str(record["file"]),
            record["document"],
            int(start),
            int(end),
        )
    except (ValueError, KeyError, TypeError):
        return None  # edited by hand beyond reading: the sentence is still a sentence


def trace_of(prefix_lines: Sequence[str]) -> Trace | None:
    """The trace among a sentence's prefix lines (`Sentence.prefix_lines`), if any."""
    for line in reversed(prefix_lines):
        trace = read_trace(line)
        if trace is not None:
            return trace
    return None
