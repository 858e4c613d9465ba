"""Writing chunk results in input order, joining the pieces of plain-text documents, and counting.

A document read in pieces is written whole or not at all, as any other document: its pieces'
output is held aside (in memory up to `HELD_IN_MEMORY` characters, then in a temporary file) until
its last piece arrives, and thrown away when a piece of it, or the rest of its input, is skipped.
For jsonl the record is joined from the pieces as the whole document would have written it: the
id, the text piece after piece, then the mentions piece after piece, then the review flag.

Counts of sentences, tokens and spans grow piece by piece (progress stays live on a long text)
and lose a document's share again when it is skipped; documents and review flags count when a
document is written.
"""

from __future__ import annotations

import shutil
import tempfile
from dataclasses import dataclass, field
from typing import IO, Any

from tagger.apply.documents import Skipped
from tagger.apply.outputs import MENTIONS_KEY, REVIEW_KEY, ChunkResult, Output

HELD_IN_MEMORY = 4_000_000  # characters of a held document kept in memory before a temporary file


@dataclass
class Tally:
    """What has been written so far; `skipped` lists every input item left out, in input order."""

    documents: int = 0
    sentences: int = 0
    tokens: int = 0
    spans: int = 0
    review: int = 0  # documents flagged for review
    skipped: list[Skipped] = field(default_factory=list)


def _held_file() -> IO[str]:
    return tempfile.SpooledTemporaryFile(  # noqa: SIM115 - closed by _HeldDocument.close
        max_size=HELD_IN_MEMORY, mode="w+", encoding="utf-8", newline=""
    )


class _HeldDocument:
    """The pieces written so far of a document read in pieces."""

    def __init__(self, document: int, head: str) -> None:
        self.document = document
        self.head = head
        self.body = _held_file()
        self.mentions: IO[str] | None = None  # jsonl only, once a piece has mentions
        self.review = False
        self.counts = Output("")  # this document's share of the tally so far

    def add(self, output: Output) -> None:
        self.body.write(output.text)
        if output.mentions_json:
            if self.mentions is None:
                self.mentions = _held_file()
            else:
                self.mentions.write(", ")
            self.mentions.write(output.mentions_json)
        self.review = self.review or output.review
        self.counts.sentences += output.sentences
        self.counts.tokens += output.tokens
        self.counts.spans += output.spans

    def write_to(self, handle: IO[str], jsonl: bool) -> None:
        if jsonl:
            handle.write(self.head)
        _copy(self.body, handle)
        if jsonl:
            handle.write(f'", "{MENTIONS_KEY}": [')
            if self.mentions is not None:
                _copy(self.mentions, handle)
            handle.write(f'], "{REVIEW_KEY}": {"true" if self.review else "false"}}}\n')

    def close(self) -> None:
        self.body.close()
        if self.mentions is not None:
            self.mentions.close()


def _copy(held: IO[str], handle: IO[str]) -> None:
    held.seek(0)
    shutil.copyfileobj(held, handle)


class OutputWriter:
    """Writes chunk results to `handle` in order and counts them into `tally`; `close` at the end."""

    def __init__(self, handle: IO[str], output_format: str, tally: Tally) -> None:
        self.handle = handle
        self.jsonl = output_format == "jsonl"
        self.tally = tally
        self._held: _HeldDocument | None = None
        self._dropping: int | None = None  # a document read in pieces that was skipped

    def write(self, result: ChunkResult) -> None:
        for entry in result.entries:
            if isinstance(entry, Skipped):
                self._skip(entry)
            elif entry.part is None:
                self._count(entry)
                self.handle.write(entry.text)
                self.tally.documents += 1
                self.tally.review += entry.review
            elif entry.part.document != self._dropping:
                self._piece(entry)

    def close(self) -> None:
        if self._held is not None:
            self._drop_held()

    def _count(self, output: Output, sign: int = 1) -> None:
        self.tally.sentences += sign * output.sentences
        self.tally.tokens += sign * output.tokens
        self.tally.spans += sign * output.spans

    def _piece(self, output: Output) -> None:
        part: Any = output.part
        if part.index == 0:
            self._held = _HeldDocument(part.document, output.head)
        held = self._held
        if held is None or held.document != part.document:
            raise RuntimeError("a piece of a document arrived out of order")
        held.add(output)
        self._count(output)
        if part.last:
            held.write_to(self.handle, self.jsonl)
            held.close()
            self._held = None
            self.tally.documents += 1
            self.tally.review += held.review

    def _skip(self, skipped: Skipped) -> None:
        if skipped.document is not None and skipped.document == self._dropping:
            return  # the document was already skipped for an earlier piece
        if self._held is not None and skipped.document == self._held.document:
            self._drop_held()
            self._dropping = skipped.document
        elif skipped.document is not None:
            self._dropping = skipped.document
        self.tally.skipped.append(skipped)

    def _drop_held(self) -> None:
        held = self._held
        if held is not None:
            self._count(held.counts, -1)
            held.close()
            self._held = None
