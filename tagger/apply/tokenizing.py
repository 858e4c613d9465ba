"""`tokenize_files`: the sentences and tokens the tagger sees in text and jsonl inputs, with offsets."""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

from tagger.apply.documents import STDIO, Skipped, detect_input_format, read_documents
from tagger.apply.outputs import table_field
from tagger.data.atomic import atomic_output
from tagger.errors import ConfigError
from tagger.text.tokenizer import TokenizerSettings, split_sentences


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
    single = len(sources) == 1 and (
        input_format == "text"
        or (input_format == "auto" and detect_input_format(sources[0]) == "text")
    )
    notes: list[str] = []
    with atomic_output(out, "w") as handle:
        for item in read_documents(sources, input_format):
            if isinstance(item, Skipped):
                raise item.error()
            parts = [] if single else [f"-DOCSTART- {table_field(item.id)}\n\n"]
            for sentence in split_sentences(item.text, settings):
                if sentence.cut:
                    line = item.line + (
                        item.text.count("\n", 0, sentence.start) if item.record is None else 0
                    )
                    notes.append(
                        f"{item.source}:{line}: a sentence longer than max_sentence_tokens="
                        f"{settings.max_sentence_tokens} tokens was cut at character "
                        f"{sentence.tokens[-1].end}; tag reports it as bad input"
                    )
                parts.extend(f"{t.text}\t{t.start}\t{t.end}\n" for t in sentence.tokens)
                parts.append("\n")
            handle.write("".join(parts))
    return notes
