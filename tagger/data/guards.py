"""What a labelled sentence must be before a model trains on it or is scored on it: labels that
are span tags (O or PREFIX-TYPE) and no more tokens than the sentence limit. Each refusal is a
DataError naming the file and line (or, for sentences from memory, the sentence and token), with
the offending label quoted short.

The limit bounds memory: sentences end at blank lines, so a file without them reads as one
sentence, and a network trained or run on a 40,000-token sentence needs gigabytes for it. Raw
text cut into sentences for tagging is held to the same default (`tagger.text.tokenizer` cuts
longer sentences); annotated sentences cannot be cut without cutting their spans, so they are
refused instead.
"""

from __future__ import annotations

from tagger.data.corpus import Sentence
from tagger.data.schemes import split_tag
from tagger.errors import DataError

# The longest sentence training and evaluation accept by default (data.max_sentence_tokens); the
# same as the tokenizer's default cut for raw text.
MAX_SENTENCE_TOKENS = 300
LIMIT_KEY = "data.max_sentence_tokens"


def located(
    message: str, sentence: Sentence, source: str, number: int, token: int | None = None
) -> DataError:
    """A DataError about a sentence (or one of its tokens): at its file line when the sentence
    was read from a file, else at its place among the sentences (`number`, 1-based) of `source`."""
    if sentence.line_numbers:
        return DataError(message, source, sentence.line_numbers[token or 0])
    place = f"sentence {number:,}" + (f", token {token + 1:,}" if token is not None else "")
    return DataError(f"{place}: {message}", source)


def check_labels(sentence: Sentence, source: str, number: int) -> None:
    """Refuse the first label of `sentence` that is not O or PREFIX-TYPE (e.g. "B-", "X-FOO")."""
    for index, label in enumerate(sentence.labels):
        try:
            split_tag(label)
        except DataError as error:
            raise located(error.message, sentence, source, number, index) from None


def check_length(
    sentence: Sentence, source: str, number: int, limit: int, remedy: str = ""
) -> None:
    """Refuse a sentence of more than `limit` tokens, saying where it ends; `remedy` says how
    to raise the limit (by default: the config key to set)."""
    if len(sentence) <= limit:
        return
    ends = f" to line {sentence.line_numbers[-1]:,}" if sentence.line_numbers else ""
    remedy = remedy or f"raise the limit (--set {LIMIT_KEY}={len(sentence)})"
    message = (
        f"a sentence of {len(sentence):,} tokens{ends} is longer than {LIMIT_KEY}={limit:,}; "
        "sentences end at blank lines, so a file without them reads as one sentence: add the "
        f"blank lines, or {remedy}"
    )
    raise located(message, sentence, source, number)


def check_sentences(sentences: list[Sentence], source: str, limit: int, remedy: str = "") -> None:
    """`check_length` and `check_labels` on each sentence of one source, in order."""
    for number, sentence in enumerate(sentences, start=1):
        check_length(sentence, source, number, limit, remedy)
        check_labels(sentence, source, number)
