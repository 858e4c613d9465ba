"""Tagging schemes as declarative tables: tags <-> spans, conversion, checks and detection.

This module owns everything that depends on how a tag prefix marks a span: reading tag sequences
into spans (one reader, :func:`read_spans`, for every scheme and for ill-formed input), writing spans
back as tags, converting between schemes, finding ill-formed transitions, guessing a file's scheme
and the transition tables a CRF decodes through.

Each scheme is a :class:`SchemeTable` saying which prefix a token gets from its place in its span.
Everything else is derived from that one rule by the shared matcher below:

    boundary between tokens i-1 and i       token i's prefix depends on its two boundaries
    ------------------------------------    ------------------------------------------------
    SAME   i continues i-1's span            first  = left boundary is not SAME
    NEXT   i starts a span of the same       last   = right boundary is not SAME
           type right where i-1's ended      touching a same-type span = boundary is NEXT
    APART  anything else (O, another type,
           a sentence edge)

For every prefix, the boundaries allowed on its left and on its right are found by enumerating the
table's rule over all nine (left, right) pairs. For all seven schemes the allowed pairs form a
product (left set x right set), so a sequence is well-formed exactly when every single boundary has
at least one relation allowed by both neighbours: well-formedness is a first-order property, which
is what lets a CRF enforce it with a transition table.

Reading needs no scheme. Each prefix plays one part in every scheme that writes it, found from the
derived boundaries: one that never shares a span with the token before it opens a span (B-, S-,
U-), one that never shares a span with the token after it closes its span (E-, S-, L-, U-), and the
rest (I-) continue the open span of their type; O and a change of type end a span. This is the
CoNLL shared-task reading of any tag sequence, and on a sequence well-formed in a scheme it gives
the spans the scheme wrote (the tests check every short sequence of every scheme).

Spans are half-open: ``(type, start, end)`` covers tokens ``start .. end-1``.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from functools import lru_cache
from types import MappingProxyType

from tagger.errors import ConfigError, DataError, quoted

Span = tuple[str, int, int]  # (type, start, end) half-open token indices

SCHEME_NAMES: tuple[str, ...] = ("IO", "IOB1", "IOB2", "IOE1", "IOE2", "BIOES", "BILOU")
OUTSIDE = "O"

_ALIASES = {"BIO": "IOB2", "IOBES": "BIOES"}

# How token i relates to token i-1; see the module docstring.
_SAME = "same"
_NEXT = "next"
_APART = "apart"
_RELATIONS = (_SAME, _NEXT, _APART)
_NONE: frozenset[str] = frozenset()


@dataclass(frozen=True)
class SchemeTable:
    """Which prefix each token of a span gets in one scheme.

    ``inside`` marks every token no other field claims. ``begin`` marks a span's first token,
    ``end`` its last, ``single`` a one-token span (``None``: the scheme has no such prefix).
    ``begin_only_after_same_type`` (IOB1) uses ``begin`` only on a span that starts right where a
    span of the same type ends; ``end_only_before_same_type`` (IOE1) is the mirror image.
    """

    name: str
    begin: str | None = None
    end: str | None = None
    single: str | None = None
    inside: str = "I"
    begin_only_after_same_type: bool = False
    end_only_before_same_type: bool = False

    @property
    def prefixes(self) -> tuple[str, ...]:
        """The prefixes this scheme writes, besides a bare ``O``."""
        marks = (self.begin, self.inside, self.end, self.single)
        return tuple(p for p in marks if p is not None)

    def prefix_for(
        self, first: bool, last: bool, after_same_type: bool, before_same_type: bool
    ) -> str:
        """The prefix of a token, from its place in its span and whether same-type spans touch it.

        ``after_same_type`` matters only for a first token, ``before_same_type`` for a last one.
        """
        if first and last and self.single is not None:
            return self.single
        if (
            first
            and self.begin is not None
            and (after_same_type or not self.begin_only_after_same_type)
        ):
            return self.begin
        if (
            last
            and self.end is not None
            and (before_same_type or not self.end_only_before_same_type)
        ):
            return self.end
        return self.inside


SCHEMES: MappingProxyType[str, SchemeTable] = MappingProxyType(
    {
        "IO": SchemeTable("IO"),
        "IOB1": SchemeTable("IOB1", begin="B", begin_only_after_same_type=True),
        "IOB2": SchemeTable("IOB2", begin="B"),
        "IOE1": SchemeTable("IOE1", end="E", end_only_before_same_type=True),
        "IOE2": SchemeTable("IOE2", end="E"),
        "BIOES": SchemeTable("BIOES", begin="B", end="E", single="S"),
        "BILOU": SchemeTable("BILOU", begin="B", end="L", single="U"),
    }
)


# What decides a boundary: the prefixes on either side (None: a sentence edge), and whether both
# tokens are inside spans of one type.
_BoundaryKey = tuple[str | None, str | None, bool]


def _boundary_key(prev: tuple[str, str] | None, cur: tuple[str, str] | None) -> _BoundaryKey:
    same_type = prev is not None and cur is not None and prev[1] == cur[1] != ""
    return (prev[0] if prev is not None else None, cur[0] if cur is not None else None, same_type)


@dataclass(frozen=True)
class _Rules:
    """The boundaries each prefix of one scheme allows on its left and on its right."""

    table: SchemeTable
    left: dict[str, frozenset[str]]
    right: dict[str, frozenset[str]]
    memo: dict[_BoundaryKey, frozenset[str]] = field(default_factory=dict, compare=False)

    @classmethod
    def derive(cls, table: SchemeTable) -> _Rules:
        left: dict[str, set[str]] = {p: set() for p in table.prefixes}
        right: dict[str, set[str]] = {p: set() for p in table.prefixes}
        for before in _RELATIONS:
            for after in _RELATIONS:
                prefix = table.prefix_for(
                    first=before != _SAME,
                    last=after != _SAME,
                    after_same_type=before == _NEXT,
                    before_same_type=after == _NEXT,
                )
                left[prefix].add(before)
                right[prefix].add(after)
        return cls(
            table,
            {p: frozenset(s) for p, s in left.items()},
            {p: frozenset(s) for p, s in right.items()},
        )

    def feasible(self, prev: tuple[str, str] | None, cur: tuple[str, str] | None) -> frozenset[str]:
        """Relations the boundary between two parsed tags may take (``None``: a sentence edge)."""
        return self.feasible_key(_boundary_key(prev, cur))

    def feasible_key(self, key: _BoundaryKey) -> frozenset[str]:
        found = self.memo.get(key)
        if found is None:
            prev_prefix, cur_prefix, same_type = key
            found = frozenset((_SAME, _NEXT)) if same_type else frozenset((_APART,))
            if prev_prefix not in (None, OUTSIDE):
                found &= self.right.get(prev_prefix, _NONE)
            if cur_prefix not in (None, OUTSIDE):
                found &= self.left.get(cur_prefix, _NONE)
            self.memo[key] = found
        return found

    def knows(self, parsed: tuple[str, str]) -> bool:
        return parsed[0] == OUTSIDE or parsed[0] in self.left

    def _marks(self, side: dict[str, frozenset[str]], relation: str) -> str:
        return " or ".join(f"{p}-" for p in self.table.prefixes if relation in side[p])

    def explain(
        self, i: int, prev: tuple[str, str] | None, cur: tuple[str, str] | None, tags: Sequence[str]
    ) -> list[tuple[int, str]]:
        """Messages for a boundary no relation fits (tags of other schemes are reported apart)."""
        if (prev is not None and not self.knows(prev)) or (cur is not None and not self.knows(cur)):
            return []  # reported once per token by the caller
        name = self.table.name
        prev_tag = tags[i - 1] if prev is not None else ""
        cur_tag = tags[i] if cur is not None else ""
        same_type = prev is not None and cur is not None and prev[1] == cur[1] != ""
        possible = frozenset((_SAME, _NEXT)) if same_type else frozenset((_APART,))
        prev_ok = prev is None or prev[0] == OUTSIDE or bool(possible & self.right[prev[0]])
        cur_ok = cur is None or cur[0] == OUTSIDE or bool(possible & self.left[cur[0]])
        problems: list[tuple[int, str]] = []
        if not cur_ok:
            assert cur is not None
            where = f"follows {prev_tag}" if prev is not None else "starts the sentence"
            if self.left[cur[0]] == {_NEXT}:
                why = f"in {name}, {cur[0]}- only marks a span starting where one of its type ends"
            else:
                why = f"{name} spans start with {self._marks(self.left, _APART)}"
            problems.append((i, f"{cur_tag} {where}; {why}"))
        if not prev_ok:
            assert prev is not None
            where = f"is followed by {cur_tag}" if cur is not None else "ends the sentence"
            if self.right[prev[0]] == {_NEXT}:
                why = f"in {name}, {prev[0]}- only marks a span ending where one of its type starts"
            else:
                why = f"{name} spans end with {self._marks(self.right, _APART)}"
            problems.append((i - 1, f"{prev_tag} {where}; {why}"))
        if prev_ok and cur_ok:
            assert prev is not None and cur is not None
            if _SAME in self.right[prev[0]]:
                expected = self._marks(self.left, _SAME)
                why = f"{prev_tag} leaves its span open, so {name} expects {expected} next"
            else:
                why = f"{prev_tag} closes its span, so {cur[0]}- has no span to continue"
            problems.append((i, f"{cur_tag} follows {prev_tag}; {why}"))
        return problems


_RULES = {name: _Rules.derive(table) for name, table in SCHEMES.items()}


def _prefixes_in_role_order() -> tuple[str, ...]:
    """Every prefix some scheme writes: begin marks first, then inside, end and single marks."""
    found: dict[str, None] = {}
    for role in ("begin", "inside", "end", "single"):
        for table in SCHEMES.values():
            mark = getattr(table, role)
            if mark is not None:
                found.setdefault(mark)
    return tuple(found)


def _never_continues(side: str) -> frozenset[str]:
    """Prefixes that no scheme lets share a span with their neighbour on ``side``."""
    return frozenset(
        prefix
        for prefix in _PREFIXES
        if all(
            _SAME not in getattr(rules, side)[prefix]
            for rules in _RULES.values()
            if prefix in rules.left
        )
    )


_PREFIXES = _prefixes_in_role_order()
_OPENS = _never_continues("left")  # B- S- U-: always start a span
_CLOSES = _never_continues("right")  # E- S- L- U-: always end the span they are in


def normalise_scheme_name(name: str) -> str:
    """The canonical name of a scheme: case-insensitive, with BIO -> IOB2 and IOBES -> BIOES."""
    key = name.strip().upper() if isinstance(name, str) else ""
    key = _ALIASES.get(key, key)
    if key not in SCHEMES:
        aliases = ", ".join(f"{a} (= {b})" for a, b in _ALIASES.items())
        raise ConfigError(
            f"unknown tagging scheme {name!r}: choose one of {', '.join(SCHEME_NAMES)} or {aliases}"
        )
    return key


@lru_cache(maxsize=8192)
def _split(tag: str) -> tuple[str, str]:
    if tag == OUTSIDE:
        return (OUTSIDE, "")
    prefix, hyphen, type_ = tag.partition("-")
    if not hyphen or prefix not in _PREFIXES:
        raise DataError(
            f"tag {quoted(tag)} is neither O nor PREFIX-TYPE with PREFIX one of "
            f"{', '.join(_PREFIXES)}"
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


def _rules(scheme: str) -> _Rules:
    return _RULES[normalise_scheme_name(scheme)]


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
            prefix == OUTSIDE or type_ != open_type or previous in _CLOSES or prefix in _OPENS
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


def _problems(tags: Sequence[str], rules: _Rules, explain: bool = True) -> list[tuple[int, str]]:
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
    return _problems(tags, _rules(scheme))


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


def _write_prefixes(ordered: Sequence[Span], length: int, rules: _Rules) -> list[str]:
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
        if after_same and _SAME in rules.feasible(
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
    return _write_prefixes(_checked_spans(spans, length), length, _rules(scheme))


def spans_to_tags(spans: Iterable[Span], length: int, scheme: str) -> list[str]:
    """The tags of ``length`` tokens holding ``spans`` in ``scheme``.

    Raises DataError for overlapping or out-of-range spans, and for touching spans of one type
    that the scheme cannot separate (IO).
    """
    ordered = _checked_spans(spans, length)
    prefixes = _write_prefixes(ordered, length, _rules(scheme))
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
    table = _rules(scheme).table
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
    rules = _rules(scheme)
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


# Tie order when several schemes fit: roughly how common each is in public corpora (common
# practice, not a measurement).
_LIKELIHOOD = ("IOB2", "BIOES", "IOB1", "BILOU", "IOE2", "IO", "IOE1")


def detect_scheme(tag_sequences: Iterable[Sequence[str]]) -> SchemeGuess:
    """Which schemes the tag sequences are consistent with (see :class:`SchemeGuess`)."""
    # per scheme: (ill-formed sentences, ill-formed transitions), to rank schemes when none fits
    misses = {name: (0, 0) for name in _LIKELIHOOD}
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
        keys = Counter(map(_boundary_key, [None, *parsed], [*parsed, None]))
        for name in _LIKELIHOOD:
            rules = _RULES[name]
            bad = sum(n for key, n in keys.items() if not rules.feasible_key(key))
            if bad:
                sentences_bad, boundaries_bad = misses[name]
                misses[name] = (sentences_bad + 1, boundaries_bad + bad)
                if name not in first_problem:
                    i, message = _problems(tags, rules)[0]
                    first_problem[name] = f"sentence {s + 1}, token {i + 1}: {message}"
    marks = ", ".join(f"{p}-" for p in sorted(prefixes - {OUTSIDE}))
    fitting = tuple(name for name in _LIKELIHOOD if misses[name] == (0, 0))
    if not marks:
        return SchemeGuess(
            fitting, f"no span tags in {sentences} sentences (only O), so any scheme fits"
        )
    if len(fitting) == 1:
        return SchemeGuess(
            fitting,
            f"all {sentences} sentences are well-formed {fitting[0]} and fit no other scheme",
        )
    if fitting:
        return SchemeGuess(
            fitting,
            f"the tags use only the prefixes {marks}, which {', '.join(fitting)} all read the "
            f"same way; the file cannot tell these schemes apart",
        )
    fewest = min(misses.values())
    nearest = tuple(name for name in _LIKELIHOOD if misses[name] == fewest)
    return SchemeGuess(
        nearest,
        f"no scheme fits every sentence (prefixes seen: {marks}); nearest: {', '.join(nearest)} "
        f"with {fewest[0]} of {sentences} sentences ill-formed, the first at "
        f"{first_problem[nearest[0]]}",
    )
