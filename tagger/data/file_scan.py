"""One pass, then a second, over an annotated column file: what `tagger.data.check` reports is
gathered here.

The first pass counts (sentences, tokens, labels, spans, extra columns), remembers each sentence by
the hash of its tokens (repeats, sentences labelled two ways, sentences shared with train) and
feeds the lexicon coverage, span labelling and tokenizer-fit counters; it yields each sentence's
labels so that the scheme can be detected on the way. The second pass, run only when needed,
checks transitions against the scheme found and fills in what only the end of the first could tell.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field
from typing import Any

from tagger.data.corpus import ColumnSource, Sentence
from tagger.data.coverage import LexiconCoverage
from tagger.data.findings import Examples, all_tags, first_non_tag, invisible_example, sentence_text
from tagger.data.guards import MAX_SENTENCE_TOKENS
from tagger.data.label_typos import LikelyTypo
from tagger.data.schemes import ill_formed_transitions, spans_lenient
from tagger.data.span_labelling import SpanLabelling
from tagger.data.tokenizer_fit import TokenizerFit

# Sentences shared with train are also counted among those of at least this many tokens, and only
# those count as leakage (`findings.gate_problems`): short ones recur in any large corpus. The
# CoNLL-2000 test file shares with train formulaic sentences of up to 6 tokens ("He declined to
# elaborate .", "In other commodity markets yesterday :") and one true duplicate of 12 tokens
# (found with `tagger check`).
LONG_SENTENCE = 8


@dataclass
class FileScan:
    """Everything gathered about one file on the first pass."""

    name: str
    limit: int
    max_tokens: int = MAX_SENTENCE_TOKENS  # longer sentences are refused by train and evaluate
    sentences: int = 0
    tokens: int = 0
    longest: tuple[int, int | None] = (0, None)  # (tokens, first line)
    labels: Counter[str] = field(default_factory=Counter)
    spans: Counter[str] = field(default_factory=Counter)
    # hash of a sentence's tokens -> (first line, hash of its labels)
    seen: dict[int, tuple[int, int]] = field(default_factory=dict)
    repeated: int = 0
    conflicting: set[int] = field(default_factory=set)
    inconsistent: Examples = field(init=False)
    invisible: Examples = field(init=False)
    not_tags: Examples = field(init=False)
    leaked: Examples = field(init=False)
    too_long: Examples = field(init=False)
    leaked_long: int = 0
    tag_sentences: int = 0  # sentences whose labels are all span tags
    first_non_tag: tuple[str, int] | None = None  # (label, line)
    values: dict[int, Counter[str]] = field(default_factory=dict)  # extra column -> values
    coverage: list[LexiconCoverage] = field(default_factory=list)
    # Could the token column be the tag column? (every token a span tag, some not O)
    tokens_all_tags: bool = True
    tokens_not_outside: bool = False
    span_labelling: SpanLabelling = field(default_factory=SpanLabelling)
    tokenizer_fit: TokenizerFit | None = None

    def __post_init__(self) -> None:
        self.inconsistent = Examples(self.limit)
        self.invisible = Examples(self.limit)
        self.not_tags = Examples(self.limit)
        self.leaked = Examples(self.limit)
        self.too_long = Examples(self.limit)


def first_pass(
    source: ColumnSource, scan: FileScan, train: FileScan | None
) -> Iterator[Sequence[str]]:
    """Reads the file once, counting into `scan`; yields each sentence's labels if all are tags."""
    has_labels = source.fmt.has_labels
    extra: list[int] | None = None
    for sentence in source.sentences():
        tokens = sentence.tokens
        if extra is None and sentence.rows:  # every line of a file has the same columns
            used = (sentence.token_column, sentence.label_column)
            extra = [c for c in range(len(sentence.rows[0])) if c not in used]
            scan.values = {c: Counter() for c in extra}
        for column in extra or ():
            scan.values[column].update(row[column] for row in sentence.rows)
        if scan.tokens_all_tags:
            scan.tokens_all_tags = all_tags(tokens)
            scan.tokens_not_outside = scan.tokens_not_outside or any(t != "O" for t in tokens)
        first_line = sentence.line_numbers[0]
        length = len(tokens)
        scan.sentences += 1
        scan.tokens += length
        if length > scan.longest[0]:
            scan.longest = (length, first_line)
        if length > scan.max_tokens:
            scan.too_long.add(
                lambda line=first_line, length=length: {"line": line, "tokens": length}
            )
        for index, token in enumerate(tokens):
            if not token.isprintable():
                line = sentence.line_numbers[index]
                scan.invisible.add(lambda token=token, line=line: invisible_example(token, line))
        if scan.tokenizer_fit is not None:
            scan.tokenizer_fit.add(tokens, sentence.line_numbers)

        token_key = hash(tuple(tokens))
        if train is not None and token_key in train.seen:
            train_line = train.seen[token_key][0]
            scan.leaked_long += length >= LONG_SENTENCE
            scan.leaked.add(
                lambda tokens=tokens, line=first_line, train_line=train_line: {
                    "line": line,
                    "train_line": train_line,
                    "text": sentence_text(tokens),
                }
            )
        labels = sentence.labels if has_labels else []
        label_key = hash(tuple(labels))
        earlier = scan.seen.get(token_key)
        if earlier is None:
            scan.seen[token_key] = (first_line, label_key)
        else:
            scan.repeated += 1
            if earlier[1] != label_key and token_key not in scan.conflicting:
                scan.conflicting.add(token_key)
                scan.inconsistent.add(
                    lambda tokens=tokens, labels=labels, lines=(earlier[0], first_line): {
                        "lines": list(lines),
                        "text": sentence_text(tokens),
                        "later_labels": list(labels),  # replaced by the first difference later
                    }
                )
        if not has_labels:
            continue
        scan.labels.update(labels)
        bad = first_non_tag(labels)
        if bad is not None:
            line = sentence.line_numbers[bad]
            if scan.first_non_tag is None:
                scan.first_non_tag = (labels[bad], line)
            scan.not_tags.add(lambda label=labels[bad], line=line: {"line": line, "label": label})
            continue
        scan.tag_sentences += 1
        spans = spans_lenient(labels)
        for type_, _, _ in spans:
            scan.spans[type_] += 1
        for coverage in scan.coverage:
            coverage.add(tokens, spans)
        scan.span_labelling.add_spans(tokens, spans, sentence.line_numbers)
        yield labels


def second_pass(
    source: ColumnSource, scan: FileScan, checked_as: str | None, typos: Sequence[LikelyTypo]
) -> tuple[Examples, dict[str, list[int]]]:
    """Read the file again, when needed, for what the first pass could only tell at its end:
    transitions checked against the scheme found, the labels of the first occurrence of each
    sentence labelled two ways, spans' token sequences found outside spans, and the lines of
    likely typos. Returns the ill-formed transitions and the lines of each typo's labels."""
    ill_formed = Examples(scan.limit)
    wanted = {e["lines"][0]: e for e in scan.inconsistent.examples}
    typo_labels = {label for typo in typos for label in typo.labels}
    lines: dict[str, list[int]] = {label: [] for label in typo_labels}
    if checked_as is None and not wanted and not scan.span_labelling.sequences and not typos:
        return ill_formed, lines
    for sentence in source.sentences():
        first = sentence.line_numbers[0]
        if first in wanted:
            _describe_difference(wanted[first], sentence)
        labels = sentence.labels
        if typo_labels:
            for index, label in enumerate(labels):
                if label in typo_labels:
                    lines[label].append(sentence.line_numbers[index])
        if not all_tags(labels):
            continue
        scan.span_labelling.add_outside(sentence.tokens, labels, sentence.line_numbers)
        if checked_as is None:
            continue
        for index, message in ill_formed_transitions(labels, checked_as):
            line = sentence.line_numbers[min(index, len(sentence) - 1)]
            ill_formed.add(lambda line=line, message=message: {"line": line, "message": message})
    return ill_formed, lines


def _describe_difference(example: dict[str, Any], first: Sentence) -> None:
    """Replace an inconsistency example's stored labels by where the two labellings differ."""
    later = example.pop("later_labels")
    earlier = first.labels
    for index, (a, b) in enumerate(zip(earlier, later, strict=True)):
        if a != b:
            example["first_difference"] = {
                "position": index + 1,
                "token": first.tokens[index],
                "labels": [a, b],
            }
            return
