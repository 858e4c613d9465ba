"""The analysis behind the `check` command: what annotated column files hold and what is wrong
with them.

`check_files` reads annotated column files and describes them: counts, the tagging scheme they
fit, ill-formed transitions, sentences too long to train on, characters one cannot see, sentences labelled two ways, token
sequences labelled two ways (`tagger.data.span_labelling`), labels that look like typos
(`tagger.data.label_typos`), the value sets of columns other than token and label, how well given
lexicons cover the annotated spans (`tagger.data.coverage`), which annotated tokens the tagging
tokenizer would not give back whole (`tagger.data.tokenizer_fit`), and, across files, what
dev/test hold that train does not and which sentences they share with train. It returns a plain
JSON-ready dict, with the problems that should stop a pipeline listed apart; `tagger.reports.check`
lays it out as text.

Memory stays proportional to the number of distinct sentences, not to the file: sentences are
remembered by the hash of their token tuple, and each file is read twice (once to count and to
find its scheme, once to check transitions against that scheme) instead of being held. Only
standard input ("-") is held, as it cannot be read twice.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

from tagger.data.corpus import ColumnFormat, ColumnSource
from tagger.data.coverage import LexiconCoverage
from tagger.data.file_scan import FileScan, first_pass, second_pass
from tagger.data.findings import (
    all_tags,
    gate_problems,
)
from tagger.data.guards import LIMIT_KEY, MAX_SENTENCE_TOKENS
from tagger.data.label_typos import likely_typos
from tagger.data.schemes import detect_scheme
from tagger.data.tokenizer_fit import Tokenizer, TokenizerFit

if TYPE_CHECKING:
    from tagger.text.lexicon import Lexicon

_ANY_FORMAT = ColumnFormat()  # the defaults: detect the delimiter, token first, label last

# Labels listed per file at most (a wrong label column can hold a whole vocabulary).
MAX_LABELS_SHOWN = 200
# Values shown per extra column (with the count of distinct values).
SHOWN_VALUES = 5


def check_files(
    paths: Sequence[str | Path],
    fmt: ColumnFormat = _ANY_FORMAT,
    max_examples: int = 5,
    lexicons: Sequence[Lexicon] = (),
    max_sentence_tokens: int = MAX_SENTENCE_TOKENS,
    tokenizer: Tokenizer | None = None,
) -> dict[str, Any]:
    """Describe annotated column files; the first is taken as train, any others as dev/test.

    Returns a JSON-ready dict: {"note": how the files were taken, "train": the first file when
    there are several (else None), "files": one report per file, "against_train": one
    comparison per later file, "problems": the findings that should stop a pipeline (see
    `gate_problems`)}.

    A file's report holds "file", "delimiter", "columns", "lines", "sentences", "tokens",
    "documents", "docstart_lines", "comment_lines", "whitespace_only_lines" (blank lines holding
    spaces or TABs), "trailing_lines", "longest_sentence" {"tokens", "line"},
    "too_long" (sentences of more than `max_sentence_tokens` tokens, which train and evaluate
    refuse: {"limit", "key", "count", "examples": [{"line", "tokens"}, ...]}),
    "repeated_sentences", "invisible_characters" and "extra_columns" (per column other than
    token and label: {"column", "distinct", "most_frequent": [{"value", "count"}, ...]});
    with labels also "lexicon_coverage" (per lexicon: {"lexicon", "entries", "spans", "exact",
    "exact_same_type", "partial", "none", "matches", "matches_outside_spans", "per_type"}: of
    the gold spans, how many a chosen match covers exactly, how many it only overlaps, how
    many it misses; how many matches overlap no gold span), "distinct_labels",
    "labels" (most frequent first, at most MAX_LABELS_SHOWN), "labels_not_shown",
    "not_span_tags", "span_types", "spans", "scheme" {"candidates", "ambiguous", "checked_as",
    "note"}, "ill_formed" (None when no scheme applies) and "inconsistent_labelling", and when
    the label column holds no span tags but other columns do, "tag_column_hint" {"label_column",
    "token_column", "tag_columns", "tokens_from"} (see `_tag_column_hint`); later files also "also_in_train".
    Findings with examples are {"count", "examples": [...]}, the examples giving 1-based file
    lines. A comparison holds "file", "span_types_not_in_train",
    "labels_not_in_train", "train_labels_absent_here", "sentences_also_in_train",
    "longer_sentences_also_in_train" and "sentences".
    Also "tokenizer_fit" (`tagger.data.tokenizer_fit`, with a `tokenizer`: text -> (start, end)
    offsets), "span_labelling" ({"types_differ", "span_or_not", "not_followed"}: token sequences
    that are spans somewhere, labelled as spans of several types, or also found wholly outside
    spans) and "likely_typos" (rare types and labels close to a frequent one: {"name", "kind",
    "count", "lines", "near", "near_count", "how"}).
    Raises DataError for unreadable files, as the reader does.
    """
    if not paths:
        raise ValueError("check_files needs at least one file")
    if max_examples < 0:
        raise ValueError(f"max_examples must be 0 or more, not {max_examples}")
    files: list[dict[str, Any]] = []
    comparisons: list[dict[str, Any]] = []
    train: FileScan | None = None
    for index, path in enumerate(paths):
        scan, report = _check_one(
            ColumnSource(path, fmt),
            fmt,
            max_examples,
            train,
            lexicons,
            max_sentence_tokens,
            tokenizer,
        )
        files.append(report)
        if index == 0:
            train = scan
        else:
            assert train is not None
            comparisons.append(_compare(train, scan))
    if len(paths) > 1:
        others = "file" if len(paths) == 2 else f"{len(paths) - 1} files"
        note = f"{files[0]['file']} is taken as training data, the other {others} as dev/test data"
    else:
        note = "one file: no comparison across files"
    return {
        "note": note,
        "train": files[0]["file"] if len(paths) > 1 else None,
        "files": files,
        "against_train": comparisons,
        "problems": gate_problems(files, comparisons),
    }


def _check_one(
    source: ColumnSource,
    fmt: ColumnFormat,
    limit: int,
    train: FileScan | None,
    lexicons: Sequence[Lexicon] = (),
    max_tokens: int = MAX_SENTENCE_TOKENS,
    tokenizer: Tokenizer | None = None,
) -> tuple[FileScan, dict[str, Any]]:
    scan = FileScan(name=str(source.path), limit=limit, max_tokens=max_tokens)
    scan.coverage = [LexiconCoverage(lexicon) for lexicon in lexicons]
    if tokenizer is not None:
        scan.tokenizer_fit = TokenizerFit(tokenizer, limit)
    # First pass: counts, hashes and the scheme. detect_scheme pulls the label sequences through
    # first_pass, which does the rest of the counting on the way.
    labelled = first_pass(source, scan, train)
    guess = detect_scheme(labelled) if fmt.has_labels else None
    for _ in labelled:  # whatever detect_scheme left unread still needs counting
        pass
    stats = source.stats

    scheme: dict[str, Any] | None = None
    checked_as: str | None = None
    if guess is not None:
        if scan.tag_sentences == 0 and scan.not_tags.count:
            label, line = scan.first_non_tag or ("", 0)
            note = (
                f"the labels are not span tags (e.g. {label!r} on line {line}), "
                "so no tagging scheme applies"
            )
            scheme = {"candidates": [], "ambiguous": False, "checked_as": None, "note": note}
        else:
            checked_as = guess.candidates[0] if guess.candidates else None
            note = guess.note
            if scan.not_tags.count:
                note += (
                    f" ({scan.not_tags.count} sentences with labels that are not span tags"
                    " were left out)"
                )
            scheme = {
                "candidates": list(guess.candidates),
                "ambiguous": len(guess.candidates) > 1,
                "checked_as": checked_as,
                "note": note,
            }

    typos = likely_typos(scan.labels) if fmt.has_labels else []
    ill_formed, typo_lines = second_pass(source, scan, checked_as, typos)

    report: dict[str, Any] = {
        "file": scan.name,
        "delimiter": stats.delimiter,
        "columns": stats.columns,
        "lines": stats.lines,
        "sentences": scan.sentences,
        "tokens": scan.tokens,
        "documents": stats.documents,
        "docstart_lines": stats.docstart_lines,
        "comment_lines": stats.comment_lines,
        "whitespace_only_lines": stats.whitespace_only_lines,
        "trailing_lines": stats.trailing_lines,
        "longest_sentence": {"tokens": scan.longest[0], "line": scan.longest[1]},
        "too_long": {"limit": scan.max_tokens, "key": LIMIT_KEY, **scan.too_long.as_dict()},
        "repeated_sentences": scan.repeated,
        "invisible_characters": scan.invisible.as_dict(),
        "extra_columns": [
            {
                "column": column,
                "distinct": len(counts),
                "most_frequent": [
                    {"value": value, "count": count}
                    for value, count in sorted(counts.items(), key=lambda kv: (-kv[1], kv[0]))[
                        :SHOWN_VALUES
                    ]
                ],
            }
            for column, counts in sorted(scan.values.items())
        ],
    }
    if fmt.has_labels:
        report["lexicon_coverage"] = [coverage.as_dict() for coverage in scan.coverage]
        shown = scan.labels.most_common(MAX_LABELS_SHOWN)
        report.update(
            {
                "distinct_labels": len(scan.labels),
                "labels": dict(shown),
                "labels_not_shown": len(scan.labels) - len(shown),
                "not_span_tags": scan.not_tags.as_dict(),
                "span_types": dict(sorted(scan.spans.items(), key=lambda kv: (-kv[1], kv[0]))),
                "spans": sum(scan.spans.values()),
                "scheme": scheme,
                "ill_formed": ill_formed.as_dict() if checked_as is not None else None,
                "inconsistent_labelling": scan.inconsistent.as_dict(),
                "span_labelling": scan.span_labelling.as_dict(limit),
                "likely_typos": [typo.as_dict(typo_lines) for typo in typos],
            }
        )
        hint = _tag_column_hint(scan, stats.columns or 0, source.fmt)
        if hint is not None:
            report["tag_column_hint"] = hint
    if scan.tokenizer_fit is not None:
        report["tokenizer_fit"] = scan.tokenizer_fit.as_dict()
    if train is not None:
        report["also_in_train"] = scan.leaked.as_dict()
    return scan, report


def _tag_column_hint(scan: FileScan, columns: int, fmt: ColumnFormat) -> dict[str, Any] | None:
    """When the label column holds no span tags but other columns hold nothing else, which ones.

    {"label_column", "token_column": the columns as read, "tag_columns": the columns holding
    only span tags (some not O), "tokens_from": the column to read the tokens from instead when
    the tags are in the token column of a two-column file (None when the token column can stay,
    or when it cannot be told)}; all 0-based."""
    if scan.tag_sentences or not scan.not_tags.count or not columns:
        return None
    token_column = fmt.token_column % columns
    label_column = fmt.label_column % columns
    tag_columns = [
        column
        for column, values in scan.values.items()
        if all_tags(list(values)) and any(value != "O" for value in values)
    ]
    if scan.tokens_all_tags and scan.tokens_not_outside:
        tag_columns.append(token_column)
    if not tag_columns:
        return None
    tokens_from = label_column if token_column in tag_columns and columns == 2 else None
    return {
        "label_column": label_column,
        "token_column": token_column,
        "tag_columns": sorted(tag_columns),
        "tokens_from": tokens_from,
    }


def _compare(train: FileScan, other: FileScan) -> dict[str, Any]:
    """What `other` holds that train does not, and what the two share."""
    train_types, other_types = set(train.spans), set(other.spans)
    train_labels, other_labels = set(train.labels), set(other.labels)
    return {
        "file": other.name,
        "span_types_not_in_train": sorted(other_types - train_types),
        "labels_not_in_train": sorted(other_labels - train_labels),
        "train_labels_absent_here": sorted(train_labels - other_labels),
        "sentences_also_in_train": other.leaked.count,
        "longer_sentences_also_in_train": other.leaked_long,
        "sentences": other.sentences,
    }
