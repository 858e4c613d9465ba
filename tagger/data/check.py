"""File-level reports behind the `check` and `convert` commands.

`check_files` reads annotated column files and describes them: counts, the tagging scheme they
fit, ill-formed transitions, characters one cannot see, sentences labelled two ways, the value
sets of columns other than token and label, how well given lexicons cover the annotated spans,
and, across files, what dev/test hold that train does not and which sentences they share with
train.
`convert_file` rewrites a file's labels in another scheme. Both return plain JSON-ready dicts;
`format_check` lays a check report out as text.

Memory stays proportional to the number of distinct sentences, not to the file: sentences are
remembered by the hash of their token tuple, and each file is read twice (once to count and to
find its scheme, once to check transitions against that scheme) instead of being held. Only
standard input ("-") is held, as it cannot be read twice.
"""

from __future__ import annotations

import contextlib
import textwrap
import unicodedata
from collections import Counter
from collections.abc import Callable, Iterable, Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from tagger.data.corpus import STDIO, ColumnFormat, ColumnReader, ReadStats, Sentence, write_columns
from tagger.data.schemes import (
    convert_tags,
    detect_scheme,
    ill_formed_transitions,
    normalise_scheme_name,
    spans_lenient,
    split_tag,
)
from tagger.errors import DataError

if TYPE_CHECKING:
    from tagger.text.lexicon import Lexicon

_ANY_FORMAT = ColumnFormat()  # the defaults: detect the delimiter, token first, label last

# Labels listed per file at most (a wrong label column can hold a whole vocabulary).
MAX_LABELS_SHOWN = 200
# Characters of a sentence shown in an example.
SHOWN_TEXT = 80
# Sentences shared with train are also counted among those of at least this many tokens: very
# short ones ("1 .", "He declined to elaborate .") recur in any large corpus (common practice,
# not a measured threshold).
LONG_SENTENCE = 5
# Values shown per extra column (with the count of distinct values).
SHOWN_VALUES = 5


@dataclass
class _Source:
    """A column file that can be read more than once (stdin is buffered on the first read)."""

    path: str | Path
    fmt: ColumnFormat
    stats: ReadStats = field(default_factory=ReadStats)
    _buffer: list[Sentence] | None = None

    def sentences(self) -> Iterator[Sentence]:
        if self._buffer is not None:
            yield from self._buffer
            return
        reader = ColumnReader(self.path, self.fmt)
        self.stats = reader.stats  # filled as the reader goes
        if str(self.path) == STDIO:
            self._buffer = list(reader)
            yield from self._buffer
            return
        yield from reader


@dataclass
class _Examples:
    """A count and the first few examples of one kind of finding."""

    limit: int
    count: int = 0
    examples: list[dict[str, Any]] = field(default_factory=list)

    def add(self, example: Callable[[], dict[str, Any]]) -> None:
        self.count += 1
        if len(self.examples) < self.limit:
            self.examples.append(example())

    def as_dict(self) -> dict[str, Any]:
        return {"count": self.count, "examples": self.examples}


@dataclass
class _Coverage:
    """How one lexicon's matches (tagger.text.lexicon) meet the gold spans of one file."""

    lexicon: Lexicon
    exact: Counter[str] = field(default_factory=Counter)  # per gold type
    same_type: Counter[str] = field(default_factory=Counter)  # exact, and of the gold type
    partial: Counter[str] = field(default_factory=Counter)
    missed: Counter[str] = field(default_factory=Counter)
    matches: int = 0
    outside: int = 0  # matches that overlap no gold span

    def add(self, tokens: Sequence[str], spans: Sequence[tuple[str, int, int]]) -> None:
        matches = self.lexicon.match(tokens)
        self.matches += len(matches)
        for start, end, _ in matches:
            if not any(start < b and a < end for _, a, b in spans):
                self.outside += 1
        for kind, a, b in spans:
            exact = [types for start, end, types in matches if (start, end) == (a, b)]
            if exact:
                self.exact[kind] += 1
                self.same_type[kind] += any(kind in types for types in exact)
            elif any(start < b and a < end for start, end, _ in matches):
                self.partial[kind] += 1
            else:
                self.missed[kind] += 1

    def as_dict(self) -> dict[str, Any]:
        types = sorted(set(self.exact) | set(self.partial) | set(self.missed))
        per_type = {
            kind: {
                "spans": self.exact[kind] + self.partial[kind] + self.missed[kind],
                "exact": self.exact[kind],
                "exact_same_type": self.same_type[kind],
                "partial": self.partial[kind],
                "none": self.missed[kind],
            }
            for kind in types
        }
        return {
            "lexicon": self.lexicon.name,
            "entries": len(self.lexicon),
            "spans": sum(t["spans"] for t in per_type.values()),
            "exact": sum(self.exact.values()),
            "exact_same_type": sum(self.same_type.values()),
            "partial": sum(self.partial.values()),
            "none": sum(self.missed.values()),
            "matches": self.matches,
            "matches_outside_spans": self.outside,
            "per_type": per_type,
        }


@dataclass
class _FileScan:
    """Everything gathered about one file on the first pass."""

    name: str
    limit: int
    sentences: int = 0
    tokens: int = 0
    longest: tuple[int, int | None] = (0, None)  # (tokens, first line)
    labels: Counter[str] = field(default_factory=Counter)
    spans: Counter[str] = field(default_factory=Counter)
    # hash of a sentence's tokens -> (first line, hash of its labels)
    seen: dict[int, tuple[int, int]] = field(default_factory=dict)
    repeated: int = 0
    conflicting: set[int] = field(default_factory=set)
    inconsistent: _Examples = field(init=False)
    invisible: _Examples = field(init=False)
    not_tags: _Examples = field(init=False)
    leaked: _Examples = field(init=False)
    leaked_long: int = 0
    tag_sentences: int = 0  # sentences whose labels are all span tags
    first_non_tag: tuple[str, int] | None = None  # (label, line)
    values: dict[int, Counter[str]] = field(default_factory=dict)  # extra column -> values
    coverage: list[_Coverage] = field(default_factory=list)

    def __post_init__(self) -> None:
        self.inconsistent = _Examples(self.limit)
        self.invisible = _Examples(self.limit)
        self.not_tags = _Examples(self.limit)
        self.leaked = _Examples(self.limit)


def check_files(
    paths: Sequence[str | Path],
    fmt: ColumnFormat = _ANY_FORMAT,
    max_examples: int = 5,
    lexicons: Sequence[Lexicon] = (),
) -> dict[str, Any]:
    """Describe annotated column files; the first is taken as train, any others as dev/test.

    Returns a JSON-ready dict: {"note": how the files were taken, "train": the first file when
    there are several (else None), "files": one report per file, "against_train": one
    comparison per later file}.

    A file's report holds "file", "delimiter", "columns", "lines", "sentences", "tokens",
    "documents", "docstart_lines", "comment_lines", "whitespace_only_lines" (blank lines holding
    spaces or TABs), "trailing_lines", "longest_sentence" {"tokens", "line"},
    "repeated_sentences", "invisible_characters" and "extra_columns" (per column other than
    token and label: {"column", "distinct", "most_frequent": [{"value", "count"}, ...]});
    with labels also "lexicon_coverage" (per lexicon: {"lexicon", "entries", "spans", "exact",
    "exact_same_type", "partial", "none", "matches", "matches_outside_spans", "per_type"}: of
    the gold spans, how many a chosen match covers exactly, how many it only overlaps, how
    many it misses; how many matches overlap no gold span), "distinct_labels",
    "labels" (most frequent first, at most MAX_LABELS_SHOWN), "labels_not_shown",
    "not_span_tags", "span_types", "spans", "scheme" {"candidates", "ambiguous", "checked_as",
    "note"}, "ill_formed" (None when no scheme applies) and "inconsistent_labelling"; later
    files also "also_in_train". Findings with examples are {"count", "examples": [...]}, the
    examples giving 1-based file lines. A comparison holds "file", "span_types_not_in_train",
    "labels_not_in_train", "train_labels_absent_here", "sentences_also_in_train",
    "longer_sentences_also_in_train" and "sentences".
    Raises DataError for unreadable files, as the reader does.
    """
    if not paths:
        raise ValueError("check_files needs at least one file")
    if max_examples < 0:
        raise ValueError(f"max_examples must be 0 or more, not {max_examples}")
    files: list[dict[str, Any]] = []
    comparisons: list[dict[str, Any]] = []
    train: _FileScan | None = None
    for index, path in enumerate(paths):
        scan, report = _check_one(_Source(path, fmt), fmt, max_examples, train, lexicons)
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
    }


def _check_one(
    source: _Source,
    fmt: ColumnFormat,
    limit: int,
    train: _FileScan | None,
    lexicons: Sequence[Lexicon] = (),
) -> tuple[_FileScan, dict[str, Any]]:
    scan = _FileScan(name=str(source.path), limit=limit)
    scan.coverage = [_Coverage(lexicon) for lexicon in lexicons]
    # First pass: counts, hashes and the scheme. detect_scheme pulls the label sequences through
    # _first_pass, which does the rest of the counting on the way.
    labelled = _first_pass(source, scan, train)
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

    # Second pass, only when needed: transitions checked against the scheme found, and the
    # labels of the first occurrence of each sentence shown as labelled two ways.
    ill_formed = _Examples(limit)
    wanted = {e["lines"][0]: e for e in scan.inconsistent.examples}
    if checked_as is not None or wanted:
        for sentence in source.sentences():
            first = sentence.line_numbers[0]
            if first in wanted:
                _describe_difference(wanted[first], sentence)
            if checked_as is None or not _all_tags(sentence.labels):
                continue
            for index, message in ill_formed_transitions(sentence.labels, checked_as):
                line = sentence.line_numbers[min(index, len(sentence) - 1)]
                ill_formed.add(
                    lambda line=line, message=message: {"line": line, "message": message}
                )

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
            }
        )
    if train is not None:
        report["also_in_train"] = scan.leaked.as_dict()
    return scan, report


def _first_pass(
    source: _Source, scan: _FileScan, train: _FileScan | None
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
        first_line = sentence.line_numbers[0]
        length = len(tokens)
        scan.sentences += 1
        scan.tokens += length
        if length > scan.longest[0]:
            scan.longest = (length, first_line)
        for index, token in enumerate(tokens):
            if not token.isprintable():
                line = sentence.line_numbers[index]
                scan.invisible.add(lambda token=token, line=line: _invisible_example(token, line))

        token_key = hash(tuple(tokens))
        if train is not None and token_key in train.seen:
            train_line = train.seen[token_key][0]
            scan.leaked_long += length >= LONG_SENTENCE
            scan.leaked.add(
                lambda tokens=tokens, line=first_line, train_line=train_line: {
                    "line": line,
                    "train_line": train_line,
                    "text": _text(tokens),
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
                        "text": _text(tokens),
                        "later_labels": list(labels),  # replaced by the first difference later
                    }
                )
        if not has_labels:
            continue
        scan.labels.update(labels)
        bad = _first_non_tag(labels)
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
        yield labels


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


def _compare(train: _FileScan, other: _FileScan) -> dict[str, Any]:
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


def _first_non_tag(labels: Sequence[str]) -> int | None:
    for index, label in enumerate(labels):
        if not _is_tag(label):
            return index
    return None


def _all_tags(labels: Sequence[str]) -> bool:
    return _first_non_tag(labels) is None


_TAG_CACHE: dict[str, bool] = {}


def _is_tag(label: str) -> bool:
    known = _TAG_CACHE.get(label)
    if known is None:
        try:
            split_tag(label)
            known = True
        except DataError:
            known = False
        if len(_TAG_CACHE) < 100_000:
            _TAG_CACHE[label] = known
    return known


def _invisible_example(token: str, line: int) -> dict[str, Any]:
    # str.isprintable() is False exactly for the Unicode "Other" (Cc, Cf, Cs, Co, Cn) and
    # "Separator" (Zs, Zl, Zp) categories, ASCII space excepted: controls, format characters such
    # as U+200B and U+FEFF, and unusual spaces.
    odd = dict.fromkeys(c for c in token if not c.isprintable())
    return {
        "line": line,
        "token": repr(token),
        "characters": [_describe_char(c) for c in odd],
    }


def _describe_char(char: str) -> str:
    name = unicodedata.name(char, "")
    category = unicodedata.category(char)
    return f"U+{ord(char):04X} {name} ({category})" if name else f"U+{ord(char):04X} ({category})"


def _text(tokens: Sequence[str]) -> str:
    text = " ".join(tokens)
    return text if len(text) <= SHOWN_TEXT else text[: SHOWN_TEXT - 3] + "..."


# --- text layout ---------------------------------------------------------------------------------

_WIDTH = 100
_KEY = 15  # width of the left-hand column of a file's rows


def format_check(report: dict[str, Any]) -> str:
    """A check report as readable text: one block per file, then the comparison with train."""
    out: list[str] = [report["note"] + "."]
    for entry in report["files"]:
        out.append("")
        out.extend(_format_file(entry))
    if report["against_train"]:
        out.append("")
        out.append(f"Against the training file {report['train']}")
        for comparison, entry in zip(report["against_train"], report["files"][1:], strict=True):
            out.extend(_format_comparison(comparison, entry))
    return "\n".join(out)


def _row(key: str, text: str) -> list[str]:
    """`key` in the left column, `text` wrapped beside it."""
    return textwrap.wrap(
        text,
        width=_WIDTH,
        initial_indent=f"  {key:<{_KEY - 2}}",
        subsequent_indent=" " * _KEY,
        break_long_words=False,
        break_on_hyphens=False,
    ) or [f"  {key}"]


def _examples(found: dict[str, Any], describe: Callable[[dict[str, Any]], str]) -> list[str]:
    texts = [describe(example) for example in found["examples"]]
    hidden = found["count"] - len(found["examples"])
    if hidden > 0:
        texts.append(f"and {hidden:,} more")
    lines: list[str] = []
    for text in texts:
        lines += textwrap.wrap(
            text,
            width=_WIDTH,
            initial_indent=" " * _KEY + "- ",
            subsequent_indent=" " * (_KEY + 2),
            break_long_words=False,
            break_on_hyphens=False,
        )
    return lines


def _count(count: int, word: str) -> str:
    return f"{count:,} {word if count == 1 else word + 's'}"


def _format_file(entry: dict[str, Any]) -> list[str]:
    out = [entry["file"]]
    size = (
        f"{_count(entry['sentences'], 'sentence')}, {_count(entry['tokens'], 'token')}, "
        f"{_count(entry['documents'], 'document')}"
    )
    if entry["columns"]:
        size += f"; {_count(entry['columns'], 'column')}, {entry['delimiter']}-separated"
    out += _row("size", size)
    longest = entry["longest_sentence"]
    if longest["line"] is not None:
        out += _row("longest", f"{_count(longest['tokens'], 'token')}, from line {longest['line']}")
    if entry["whitespace_only_lines"]:
        out += _row(
            "blank lines",
            f"{_count(entry['whitespace_only_lines'], 'line')} holding only spaces or TABs, "
            "taken as empty lines",
        )
    if entry["trailing_lines"]:
        out += _row(
            "after end",
            f"{_count(entry['trailing_lines'], 'line')} of document marks, comments or blanks "
            "after the last sentence, which belong to no sentence",
        )
    if "scheme" in entry:
        out += _format_labels(entry)
    for column in entry["extra_columns"]:
        shown = ", ".join(f"{v['value']}={v['count']:,}" for v in column["most_frequent"])
        more = column["distinct"] - len(column["most_frequent"])
        out += _row(
            f"column {column['column']}",
            f"{_count(column['distinct'], 'distinct value')}: {shown}"
            + (f", and {more:,} more" if more > 0 else ""),
        )
    for coverage in entry.get("lexicon_coverage", []):
        out += _format_coverage(coverage)
    found = entry["invisible_characters"]
    if found["count"]:
        out += _row(
            "hidden chars",
            f"{_count(found['count'], 'token')} holding invisible, control or unusual space "
            "characters:",
        )
        out += _examples(
            found, lambda e: f"line {e['line']}: {e['token']}, {', '.join(e['characters'])}"
        )
    repeated = entry["repeated_sentences"]
    verb = "repeats" if repeated == 1 else "repeat"
    out += _row("repeats", f"{_count(repeated, 'sentence')} {verb} an earlier one of this file")
    return out


def _format_labels(entry: dict[str, Any]) -> list[str]:
    out: list[str] = []
    scheme = entry["scheme"]
    if scheme is not None:
        if scheme["checked_as"] is None:
            out += _row("scheme", f"unknown: {scheme['note']}")
        else:
            names = " or ".join(scheme["candidates"])
            if scheme["ambiguous"]:
                names += f" (several fit equally well; checked as {scheme['checked_as']})"
            out += _row("scheme", f"{names}: {scheme['note']}")
    types = ", ".join(f"{name}={count:,}" for name, count in entry["span_types"].items())
    out += _row("spans", f"{entry['spans']:,}" + (f": {types}" if types else ""))
    labels = ", ".join(f"{name}={count:,}" for name, count in entry["labels"].items())
    if entry["labels_not_shown"]:
        labels += f", and {entry['labels_not_shown']:,} rarer ones"
    out += _row("labels", f"{entry['distinct_labels']:,} distinct: {labels}" if labels else "none")
    found = entry["not_span_tags"]
    if found["count"]:
        out += _row(
            "not tags",
            f"{_count(found['count'], 'sentence')} with labels that are neither O nor PREFIX-TYPE:",
        )
        out += _examples(found, lambda e: f"line {e['line']}: {e['label']!r}")
    found = entry["ill_formed"]
    if found is not None:
        if found["count"]:
            out += _row("ill-formed", f"{_count(found['count'], 'transition')}:")
            out += _examples(found, lambda e: f"line {e['line']}: {e['message']}")
        else:
            out += _row("ill-formed", "none")
    found = entry["inconsistent_labelling"]
    if found["count"]:
        out += _row(
            "conflicts",
            f"{_count(found['count'], 'token sequence')} labelled in more than one way:",
        )
        out += _examples(found, _describe_conflict)
    return out


def _share(part: int, whole: int) -> str:
    return f"{100 * part / whole:.1f}%" if whole else "-"


def _format_coverage(coverage: dict[str, Any]) -> list[str]:
    spans, entries, matches = coverage["spans"], coverage["entries"], coverage["matches"]
    text = (
        f"{coverage['lexicon']} ({entries:,} {'entry' if entries == 1 else 'entries'}) covers "
        f"{coverage['exact']:,} of {_count(spans, 'gold span')} exactly "
        f"({_share(coverage['exact'], spans)}; {coverage['exact_same_type']:,} with the same "
        f"type), {coverage['partial']:,} in part, {coverage['none']:,} not at all; "
        f"{coverage['matches_outside_spans']:,} of its {matches:,} "
        f"{'match' if matches == 1 else 'matches'} lie outside every gold span"
    )
    out = _row("lexicon", text)
    by_type = "; ".join(
        f"{kind} {t['exact']:,} of {t['spans']:,} exactly, {t['partial']:,} in part"
        for kind, t in coverage["per_type"].items()
    )
    if by_type:
        out += _row("", f"by type: {by_type}")
    return out


def _describe_conflict(example: dict[str, Any]) -> str:
    first, later = example["lines"]
    text = f"lines {first} and {later}: {example['text']!r}"
    difference = example.get("first_difference")
    if difference:
        a, b = difference["labels"]
        text += f", token {difference['position']} {difference['token']!r} is {a}, then {b}"
    return text


def _format_comparison(comparison: dict[str, Any], entry: dict[str, Any]) -> list[str]:
    out = ["", comparison["file"]]
    for key, title in (
        ("span_types_not_in_train", "new types"),
        ("labels_not_in_train", "new labels"),
        ("train_labels_absent_here", "train only"),
    ):
        items = comparison[key]
        out += _row(title, ", ".join(items) if items else "none")
    shared = comparison["sentences_also_in_train"]
    longer = comparison["longer_sentences_also_in_train"]
    text = f"{shared:,} of {comparison['sentences']:,} sentences also occur in train"
    if shared:
        text += f" ({longer:,} of them with {LONG_SENTENCE} tokens or more):"
    out += _row("overlap", text)
    out += _examples(
        entry["also_in_train"],
        lambda e: f"line {e['line']} (train line {e['train_line']}): {e['text']!r}",
    )
    return out


# --- conversion ---------------------------------------------------------------------------------


def convert_file(
    src: str | Path,
    dst: str | Path,
    target_scheme: str,
    fmt: ColumnFormat = _ANY_FORMAT,
    source_scheme: str | None = None,
) -> dict[str, Any]:
    """Rewrite the label column of `src` in `target_scheme` into `dst`, other columns untouched.

    The source scheme is detected when not given (the first candidate; all candidates read
    well-formed data the same way). Sentences that are ill-formed in the source scheme are read
    the lenient CoNLL way and counted in the summary. The output keeps the source's delimiter,
    document marks and comments. `dst` is replaced only when the whole file is written.
    Returns {"file", "output", "sentences", "tokens", "source_scheme", "target_scheme",
    "changed_labels", "ill_formed_sentences", "note"}.
    """
    if not fmt.has_labels:
        raise DataError("converting needs a label column (has_labels is False)", str(src))
    target = normalise_scheme_name(target_scheme)
    source = _Source(src, fmt)
    note = ""
    if source_scheme is None:
        with _located(src):
            guess = detect_scheme(s.labels for s in source.sentences())
        if not guess.candidates:
            raise DataError(f"cannot tell the tagging scheme: {guess.note}", str(src))
        chosen = guess.candidates[0]
        note = guess.note
    else:
        chosen = normalise_scheme_name(source_scheme)

    counts = {"sentences": 0, "tokens": 0, "changed": 0, "ill_formed": 0}

    def converted() -> Iterator[Sentence]:
        for sentence in source.sentences():
            labels = sentence.labels
            with _located(src, sentence.first_line):
                if ill_formed_transitions(labels, chosen):
                    counts["ill_formed"] += 1
                new = convert_tags(labels, chosen, target)
            counts["sentences"] += 1
            counts["tokens"] += len(labels)
            counts["changed"] += sum(a != b for a, b in zip(labels, new, strict=True))
            yield sentence.with_labels(new)

    sentences = converted()
    first = next(sentences, None)  # reading the first sentence settles the delimiter
    delimiter = fmt.delimiter or source.stats.delimiter or "tab"
    if first is None:
        write_columns(dst, [], delimiter)
    else:
        write_columns(dst, _prepend(first, sentences), delimiter)
    return {
        "file": str(src),
        "output": str(dst),
        "sentences": counts["sentences"],
        "tokens": counts["tokens"],
        "source_scheme": chosen,
        "target_scheme": target,
        "changed_labels": counts["changed"],
        "ill_formed_sentences": counts["ill_formed"],
        "note": note,
    }


def _prepend(first: Sentence, rest: Iterable[Sentence]) -> Iterator[Sentence]:
    yield first
    yield from rest


@contextlib.contextmanager
def _located(path: str | Path, line: int | None = None) -> Iterator[None]:
    """Give a DataError raised without a place the file (and line) it concerns."""
    try:
        yield
    except DataError as error:
        if error.path is not None:
            raise
        raise DataError(error.message, str(path), line) from error
