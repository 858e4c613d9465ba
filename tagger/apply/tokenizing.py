"""`tokenize_files`: the sentences and tokens the tagger sees in text, lines and jsonl inputs,
with offsets."""

from __future__ import annotations

from collections.abc import Sequence
from enum import StrEnum
from pathlib import Path

from tagger.apply.documents import STDIO, Skipped, detect_input_format, read_documents
from tagger.apply.engine import line_inputs_hint, too_long
from tagger.apply.outputs import table_field
from tagger.apply.plaintext import document_sentences
from tagger.data.atomic import atomic_output
from tagger.errors import ConfigError
from tagger.reports.layout import count
from tagger.reports.notes import RepeatedNotes
from tagger.text.tokenizer import TokenizerSettings

ONE_DOCUMENT_FORMATS = ("text", "sentence-lines")  # an input of these is one document


class TokenizeFormat(StrEnum):
    """How `tokenize` reads an input: the input formats of `tag` but columns (already tokens)."""

    AUTO = "auto"
    TEXT = "text"
    SENTENCE_LINES = "sentence-lines"
    LINES = "lines"
    JSONL = "jsonl"


def tokenize_files(
    inputs: Sequence[str | Path],
    out: str | Path,
    settings: TokenizerSettings = TokenizerSettings(),
    input_format: str = "auto",
) -> list[str]:
    """Write the tokens the tagger sees: "token<TAB>start<TAB>end" per line, a blank line after
    each sentence, and a "-DOCSTART- ID" line before each document unless the input is one text.

    Returns notes on sentences cut at `settings.max_sentence_tokens` (which `tag` reports as bad
    input). Raises DataError at the first item that cannot be read.
    """
    if input_format == "columns" or (
        input_format == "auto" and any(detect_input_format(p) == "columns" for p in inputs)
    ):
        raise ConfigError("column files are tokenised already; tokenize reads text or jsonl")
    sources = list(inputs) or [STDIO]
    kind = input_format if input_format != "auto" else detect_input_format(sources[0])
    single = len(sources) == 1 and kind in ONE_DOCUMENT_FORMATS
    notes = RepeatedNotes()
    with atomic_output(out, "w") as handle:
        for item in read_documents(sources, input_format, settings=settings):
            if isinstance(item, Skipped):
                raise item.error()
            parts = [] if single or not item.first else [f"-DOCSTART- {table_field(item.id)}\n\n"]
            offset = item.offset
            for shift, sentence in document_sentences(
                item.text, settings, item.line_breaks_end_sentences
            ):
                start = shift + sentence.start
                if sentence.cut:
                    line = item.line + (
                        item.text.count("\n", 0, start) if item.record is None else 0
                    )
                    cut_at = offset + shift + sentence.tokens[-1].end
                    limit, hint = settings.max_sentence_tokens, line_inputs_hint(item.input_format)
                    first = f"{item.source}:{line}"
                    notes.add(
                        f"cut {hint}",
                        f"{first}: {too_long(limit, offset + start, None)} and was cut at "
                        f"character {cut_at}; tag reports it as bad input{hint}",
                        lambda n, first=first, limit=limit, hint=hint: (
                            f"{count(n, 'sentence')} were cut at max_sentence_tokens={limit} "
                            f"tokens (first: {first}); tag reports them as bad input{hint}"
                        ),
                    )
                parts.extend(
                    f"{t.text}\t{offset + shift + t.start}\t{offset + shift + t.end}\n"
                    for t in sentence.tokens
                )
                parts.append("\n")
            handle.write("".join(parts))
    return notes.lines()
