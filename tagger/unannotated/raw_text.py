"""Unannotated text as the tagger sees it: the token lists of every sentence of every input.

Inputs are read as `tagger tag` reads them (plain text, lines, JSON Lines or column files, `-`
for standard input, `.gz` for compressed files) and cut by the same tokenizer with the same
settings, so that what is learnt from raw text meets the same tokens at tagging time.
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path

from tagger.apply.documents import STDIO, Skipped, read_documents
from tagger.apply.plaintext import document_sentences
from tagger.data.atomic import atomic_output
from tagger.reports.notes import RepeatedNotes
from tagger.text.tokenizer import TokenizerSettings


def raw_sentences(
    inputs: Sequence[str | Path],
    settings: TokenizerSettings,
    input_format: str = "auto",
    token_column: int = 0,
    notes: RepeatedNotes | None = None,
) -> Iterator[list[str]]:
    """The tokens of each sentence, input after input; the first unreadable item is a DataError
    naming its file and line (raw text is meant to be read whole, not skipped through). Remarks
    for people (a text input that looks like a column file) are appended to `notes`."""
    for item in read_documents(
        list(inputs) or [STDIO], input_format, token_column, notes, settings=settings
    ):
        if isinstance(item, Skipped):
            raise item.error()
        if item.sentence is not None:  # a column file: tokenised already
            yield list(item.sentence.tokens)
            continue
        for _, sentence in document_sentences(item.text, settings, item.line_breaks_end_sentences):
            if sentence.tokens:
                yield [token.text for token in sentence.tokens]


@dataclass(frozen=True)
class CorpusSize:
    sentences: int
    tokens: int


def write_sentence_lines(sentences: Iterator[list[str]], path: str | Path) -> CorpusSize:
    """One sentence per line, tokens separated by single spaces (whitespace inside a token, which
    column files allow, becomes "_"): the corpus file the vector learner reads."""
    n_sentences = n_tokens = 0
    with atomic_output(path, "w") as out:
        for tokens in sentences:
            out.write(" ".join("_".join(token.split()) for token in tokens) + "\n")
            n_sentences += 1
            n_tokens += len(tokens)
    return CorpusSize(n_sentences, n_tokens)
