"""Tagging schemes in use: tags <-> spans, conversion, checks and detection.

This module owns everything done with tag sequences: reading them into spans (one reader,
:func:`read_spans`, for every scheme and for ill-formed input), writing spans back as tags,
converting between schemes, finding ill-formed transitions, guessing a file's scheme and the
transition tables a CRF decodes through. The schemes themselves, one table row each, and the rules
derived from them live in :mod:`tagger.data.scheme_rules`.

Reading needs no scheme: B-/S-/U- open a span, E-/S-/L-/U- close it, I- continues the open span
of its type; O and a change of type end a span. This is the CoNLL shared-task reading of any tag
sequence, and on a sequence well-formed in a scheme it gives the spans the scheme wrote (the tests
check every short sequence of every scheme).

Spans are half-open: ``(type, start, end)`` covers tokens ``start .. end-1``.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from functools import lru_cache

from tagger.data.scheme_rules import (
    CLOSES,
    DETECTION_ORDER,
    OPENS,
    OUTSIDE,
    PREFIXES,
    RULES,
    SAME,
    SCHEME_NAMES,
    SCHEMES,
    Rules,
    SchemeName,
    SchemeTable,
    boundary_key,
    normalise_scheme_name,
    rules_for,
)
from tagger.errors import DataError, quoted

__all__ = [
    "OUTSIDE",
    "SCHEMES",
    "SCHEME_NAMES",
    "SchemeGuess",
    "SchemeName",
    "SchemeTable",
    "Span",
    "allowed_transitions",
    "convert_tags",
    "detect_scheme",
    "ill_formed_transitions",
    "labels_for_types",
    "normalise_scheme_name",
    "read_spans",
    "span_prefixes",
    "spans_lenient",
    "spans_to_tags",
    "split_tag",
    "tags_to_spans",
]

Span = tuple[str, int, int]  # (type, start, end) half-open token indices


@lru_cache(maxsize=8192)
def _split(tag: str) -> tuple[str, str]:
    if tag == OUTSIDE:
        return (OUTSIDE, "")
    prefix, hyphen, type_ = tag.partition("-")
    if not hyphen or prefix not in PREFIXES:
        raise DataError(
            f"tag {quoted(tag)} is neither O nor PREFIX-TYPE with PREFIX one of "
            f"{', '.join(PREFIXES)}"
        )
    if not type_:
        raise DataError(f"tag {quoted(tag)} has no type after its prefix")
    return (prefix, type_)


def split_tag(tag: str) -> tuple[str, str]:
    """``"B-PER"`` -> ``("B", "PER")``; ``"O"`` -> ``("O", "")``. Splits on the first hyphen only.

    Raises DataError for anything else (an unknown prefix, a missing type, a typed ``O``).
    """
    if not isinstance(tag, str):
        raise DataError(f"tag {quoted(tag)} is not a string")
    return _split(tag)


def read_spans(parsed: Sequence[tuple[str, str]]) -> list[Span]:
    """The spans of parsed tags, ``(prefix, type)`` pairs as :func:`split_tag` gives them.

    The one reading of tags as spans (see the module docstring): B-/S-/U- always start a span,
    E-/S-/L-/U- always end one, any other prefix continues the open span of its type or starts
    one, and O or a change of type ends the open span. Prefixes of all schemes may be mixed.
    """
    spans: list[Span] = []
    open_type: str | None = None
    start = 0
    previous = OUTSIDE
    for i, (prefix, type_) in enumerate(parsed):
        if open_type is not None and (
            prefix == OUTSIDE or type_ != open_type or previous in CLOSES or prefix in OPENS
        ):
            spans.append((open_type, start, i))
            open_type = None
        if prefix != OUTSIDE and open_type is None:
            open_type, start = type_, i
        previous = prefix
    if open_type is not None:
        spans.append((open_type, start, len(parsed)))
    return spans


def spans_lenient(tags: Sequence[str]) -> list[Span]:
    """Spans of any tag sequence, read the way CoNLL shared-task scoring reads it.

    Prefixes of all schemes may be mixed: an I- tag after O (or at the sentence start) starts a
    span, a change of type starts a span, B-/S-/U- always start one and E-/S-/L-/U- always end one.
    Unknown prefixes raise DataError.
    """
    return read_spans([split_tag(t) for t in tags])


def _problems(tags: Sequence[str], rules: Rules, explain: bool = True) -> list[tuple[int, str]]:
    """Every ill-formed transition of ``tags`` in one scheme, in token order.

    With ``explain=False`` the problems carry empty messages (cheaper, for counting).
    """
    parsed = [split_tag(t) for t in tags]
    problems: list[tuple[int, str]] = []
    for i, cur in enumerate(parsed):
        prev = parsed[i - 1] if i else None
        if not rules.knows(cur):
            options = ", ".join(f"{p}-" for p in rules.table.prefixes)
            message = (
                f"{tags[i]}: {rules.table.name} has no {cur[0]}- prefix (it uses O and {options})"
            )
            problems.append((i, message if explain else ""))
        if not rules.feasible(prev, cur):
            problems.extend(rules.explain(i, prev, cur, tags) if explain else [(i, "")])
    if parsed and not rules.feasible(parsed[-1], None):
        problems.extend(
            rules.explain(len(parsed), parsed[-1], None, tags)
            if explain
            else [(len(parsed) - 1, "")]
        )
    problems.sort(key=lambda p: p[0])
    return problems


def tags_to_spans(tags: Sequence[str], scheme: str) -> list[Span]:
    """Spans of a tag sequence written in ``scheme`` (checked by name): :func:`read_spans`.

    Well-formed input reads as the scheme wrote it and ill-formed input leniently, so the scheme
    does not change the reading (see the module docstring); it matters for which input counts as
    well-formed (:func:`ill_formed_transitions`).
    """
    normalise_scheme_name(scheme)
    return read_spans([split_tag(t) for t in tags])


def ill_formed_transitions(tags: Sequence[str], scheme: str) -> list[tuple[int, str]]:
    """``(token index, message)`` for each place ``tags`` breaks ``scheme``'s rules, in order.

    Covers I-X after O where spans must start with B-, a type change inside an open span, E-
    without a start, B- never closed, prefixes the scheme does not use, and the like.
    """
    return _problems(tags, rules_for(scheme))


def _checked_spans(spans: Iterable[Span], length: int) -> list[Span]:
    """Spans sorted by position, each checked to lie in ``length`` tokens; no two may overlap."""
    ordered: list[Span] = []
    for span in spans:
        try:
            type_, start, end = span
        except (TypeError, ValueError):
            raise DataError(f"span {span!r} is not a (type, start, end) triple") from None
        if not isinstance(type_, str) or not type_:
            raise DataError(f"span {span!r} has an invalid type")
        if not (isinstance(start, int) and isinstance(end, int) and 0 <= start < end <= length):
            raise DataError(f"span {span!r} does not fit 0 <= start < end <= {length}")
        ordered.append((type_, start, end))
    ordered.sort(key=lambda s: (s[1], s[2]))
    for a, b in zip(ordered, ordered[1:], strict=False):
        if b[1] < a[2]:
            raise DataError(
                f"spans {a!r} and {b!r} overlap; a tag sequence holds only non-overlapping spans"
            )
    return ordered


def _write_prefixes(ordered: Sequence[Span], length: int, rules: Rules) -> list[str]:
    """Each token's prefix (``"O"`` outside) for spans checked and sorted by :func:`_checked_spans`."""
    table = rules.table
    prefixes = [OUTSIDE] * length
    for k, (type_, start, end) in enumerate(ordered):
        after_same = k > 0 and ordered[k - 1][2] == start and ordered[k - 1][0] == type_
        before_same = (
            k + 1 < len(ordered) and ordered[k + 1][1] == end and ordered[k + 1][0] == type_
        )
        for i in range(start, end):
            prefixes[i] = table.prefix_for(i == start, i == end - 1, after_same, before_same)
        if after_same and SAME in rules.feasible(
            (prefixes[start - 1], type_), (prefixes[start], type_)
        ):
            raise DataError(
                f"{table.name} cannot separate touching spans of one type: a {type_!r} span "
                f"ends at token {start} where the next {type_!r} span starts; choose a scheme "
                f"with B-, E- or S- tags"
            )
    return prefixes


def span_prefixes(spans: Iterable[Span], length: int, scheme: str) -> list[str]:
    """The prefix each of ``length`` tokens gets in ``scheme`` from the span holding it (``"O"``
    outside every span): :func:`spans_to_tags` without the types, for marks kept as ids.

    Raises DataError as :func:`spans_to_tags` does.
    """
    return _write_prefixes(_checked_spans(spans, length), length, rules_for(scheme))


def spans_to_tags(spans: Iterable[Span], length: int, scheme: str) -> list[str]:
    """The tags of ``length`` tokens holding ``spans`` in ``scheme``.

    Raises DataError for overlapping or out-of-range spans, and for touching spans of one type
    that the scheme cannot separate (IO).
    """
    ordered = _checked_spans(spans, length)
    prefixes = _write_prefixes(ordered, length, rules_for(scheme))
    tags = [OUTSIDE] * length
    for type_, start, end in ordered:
        for i in range(start, end):
            tags[i] = f"{prefixes[i]}-{type_}"
    return tags


def convert_tags(tags: Sequence[str], source: str, target: str) -> list[str]:
    """Re-tag a sequence from ``source`` to ``target``; the spans stay the same.

    Raises DataError when ``target`` cannot hold the spans (IO and touching same-type spans).
    """
    return spans_to_tags(tags_to_spans(tags, source), len(tags), target)


def labels_for_types(types: Iterable[str], scheme: str) -> list[str]:
    """Every label ``scheme`` can write for ``types``: ``"O"`` first, then the rest sorted."""
    table = rules_for(scheme).table
    labels: set[str] = set()
    for type_ in types:
        if not isinstance(type_, str) or not type_:
            raise DataError(f"span type {type_!r} must be a non-empty string")
        labels.update(f"{p}-{type_}" for p in table.prefixes)
    return [OUTSIDE, *sorted(labels)]


def allowed_transitions(
    labels: Sequence[str], scheme: str
) -> tuple[list[bool], list[list[bool]], list[bool]]:
    """Transition tables for a CRF over ``labels`` in ``scheme``.

    Returns ``start_ok[j]`` (a sentence may start with ``labels[j]``), ``trans_ok[i][j]``
    (``labels[j]`` may follow ``labels[i]``) and ``end_ok[i]`` (a sentence may end with
    ``labels[i]``). A path through allowed entries only is always well-formed in ``scheme``. Labels
    the scheme never writes (``"<pad>"``, prefixes of other schemes) get False everywhere.
    """
    rules = rules_for(scheme)
    parsed: list[tuple[str, str] | None] = []
    for label in labels:
        try:
            p = split_tag(label)
        except DataError:
            p = None
        parsed.append(p if p is not None and rules.knows(p) else None)
    start_ok = [p is not None and bool(rules.feasible(None, p)) for p in parsed]
    end_ok = [p is not None and bool(rules.feasible(p, None)) for p in parsed]
    trans_ok = [
        [a is not None and b is not None and bool(rules.feasible(a, b)) for b in parsed]
        for a in parsed
    ]
    return start_ok, trans_ok, end_ok


@dataclass(frozen=True)
class SchemeGuess:
    """Schemes a set of tag sequences fits, most likely first, and a note for people.

    ``candidates`` are the schemes in which every sequence is well-formed (all of them read the
    data identically). When none is, they are the schemes with the fewest ill-formed sequences,
    and ``note`` says so.
    """

    candidates: tuple[str, ...]
    note: str


def detect_scheme(tag_sequences: Iterable[Sequence[str]]) -> SchemeGuess:
    """Which schemes the tag sequences are consistent with (see :class:`SchemeGuess`)."""
    # per scheme: (ill-formed sentences, ill-formed transitions), to rank schemes when none fits
    misses = {name: (0, 0) for name in DETECTION_ORDER}
    first_problem: dict[str, str] = {}
    prefixes: set[str] = set()
    sentences = 0
    for s, tags in enumerate(tag_sequences):
        sentences += 1
        parsed = [split_tag(t) for t in tags]
        if all(p[0] == OUTSIDE for p in parsed):
            continue  # every scheme reads an all-O sentence
        prefixes.update(p[0] for p in parsed)
        # A sentence is well-formed iff each boundary is: check each distinct boundary once.
        keys = Counter(map(boundary_key, [None, *parsed], [*parsed, None]))
        for name in DETECTION_ORDER:
            rules = RULES[name]
            bad = sum(n for key, n in keys.items() if not rules.feasible_key(key))
            if bad:
                sentences_bad, boundaries_bad = misses[name]
                misses[name] = (sentences_bad + 1, boundaries_bad + bad)
                if name not in first_problem:
                    i, message = _problems(tags, rules)[0]
                    first_problem[name] = f"sentence {s + 1}, token {i + 1}: {message}"
    marks = ", ".join(f"{p}-" for p in sorted(prefixes - {OUTSIDE}))
    fitting = tuple(name for name in DETECTION_ORDER if misses[name] == (0, 0))
    if not marks:
        return SchemeGuess(
            fitting,
            f"no span tags in {sentences:,} sentence{'' if sentences == 1 else 's'} (only O), "
            "so any scheme fits",
        )
    if len(fitting) == 1:
        return SchemeGuess(
            fitting,
            f"all {sentences:,} sentences are well-formed {fitting[0]} and fit no other scheme",
        )
    if fitting:
        return SchemeGuess(
            fitting,
            f"the tags use only the prefixes {marks}, which {', '.join(fitting)} all read the "
            f"same way; the file cannot tell these schemes apart",
        )
    fewest = min(misses.values())
    nearest = tuple(name for name in DETECTION_ORDER if misses[name] == fewest)
    return SchemeGuess(
        nearest,
        f"no scheme fits every sentence (prefixes seen: {marks}); nearest: {', '.join(nearest)} "
        f"with {fewest[0]} of {sentences} sentences ill-formed, the first at "
        f"{first_problem[nearest[0]]}",
    )
