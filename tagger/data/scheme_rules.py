"""The tagging schemes' tables and the rules derived from them: one row per scheme.

Each scheme is a :class:`SchemeTable` saying which prefix a token gets from its place in its span.
Everything else is derived from that one rule:

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

Each prefix also plays one part in every scheme that writes it: one that never shares a span with
the token before it opens a span (B-, S-, U-), one that never shares a span with the token after
it closes its span (E-, S-, L-, U-); the rest (I-) continue the open span of their type.

Adding a scheme is one row in :data:`SCHEMES`: its names (the command line's choices and the
config's validation come from :class:`SchemeName`), prefixes, rules and detection order follow.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from enum import StrEnum
from types import MappingProxyType

from tagger.errors import ConfigError

OUTSIDE = "O"

# How token i relates to token i-1; see the module docstring.
SAME = "same"
NEXT = "next"
APART = "apart"
_RELATIONS = (SAME, NEXT, APART)
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
    aliases: tuple[str, ...] = ()  # other names people give the scheme
    # Tie order when several schemes fit a file (lower first): roughly how common each is in
    # public corpora (common practice, not a measurement).
    detection_rank: int = 99

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
        "IO": SchemeTable("IO", detection_rank=6),
        "IOB1": SchemeTable("IOB1", begin="B", begin_only_after_same_type=True, detection_rank=3),
        "IOB2": SchemeTable("IOB2", begin="B", aliases=("BIO",), detection_rank=1),
        "IOE1": SchemeTable("IOE1", end="E", end_only_before_same_type=True, detection_rank=7),
        "IOE2": SchemeTable("IOE2", end="E", detection_rank=5),
        "BIOES": SchemeTable(
            "BIOES", begin="B", end="E", single="S", aliases=("IOBES",), detection_rank=2
        ),
        "BILOU": SchemeTable("BILOU", begin="B", end="L", single="U", detection_rank=4),
    }
)


SCHEME_NAMES: tuple[str, ...] = tuple(SCHEMES)
ALIASES: MappingProxyType[str, str] = MappingProxyType(
    {alias: name for name, table in SCHEMES.items() for alias in table.aliases}
)
# The names a user may give a scheme, for the command line's choices and the config.
SchemeName = StrEnum("SchemeName", {name: name for name in (*SCHEME_NAMES, *ALIASES)})
DETECTION_ORDER: tuple[str, ...] = tuple(
    sorted(SCHEMES, key=lambda name: SCHEMES[name].detection_rank)
)


# What decides a boundary: the prefixes on either side (None: a sentence edge), and whether both
# tokens are inside spans of one type.
BoundaryKey = tuple[str | None, str | None, bool]


def boundary_key(prev: tuple[str, str] | None, cur: tuple[str, str] | None) -> BoundaryKey:
    same_type = prev is not None and cur is not None and prev[1] == cur[1] != ""
    return (prev[0] if prev is not None else None, cur[0] if cur is not None else None, same_type)


@dataclass(frozen=True)
class Rules:
    """The boundaries each prefix of one scheme allows on its left and on its right."""

    table: SchemeTable
    left: dict[str, frozenset[str]]
    right: dict[str, frozenset[str]]
    memo: dict[BoundaryKey, frozenset[str]] = field(default_factory=dict, compare=False)

    @classmethod
    def derive(cls, table: SchemeTable) -> Rules:
        left: dict[str, set[str]] = {p: set() for p in table.prefixes}
        right: dict[str, set[str]] = {p: set() for p in table.prefixes}
        for before in _RELATIONS:
            for after in _RELATIONS:
                prefix = table.prefix_for(
                    first=before != SAME,
                    last=after != SAME,
                    after_same_type=before == NEXT,
                    before_same_type=after == NEXT,
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
        return self.feasible_key(boundary_key(prev, cur))

    def feasible_key(self, key: BoundaryKey) -> frozenset[str]:
        found = self.memo.get(key)
        if found is None:
            prev_prefix, cur_prefix, same_type = key
            found = frozenset((SAME, NEXT)) if same_type else frozenset((APART,))
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
        possible = frozenset((SAME, NEXT)) if same_type else frozenset((APART,))
        prev_ok = prev is None or prev[0] == OUTSIDE or bool(possible & self.right[prev[0]])
        cur_ok = cur is None or cur[0] == OUTSIDE or bool(possible & self.left[cur[0]])
        problems: list[tuple[int, str]] = []
        if not cur_ok:
            assert cur is not None
            where = f"follows {prev_tag}" if prev is not None else "starts the sentence"
            if self.left[cur[0]] == {NEXT}:
                why = f"in {name}, {cur[0]}- only marks a span starting where one of its type ends"
            else:
                why = f"{name} spans start with {self._marks(self.left, APART)}"
            problems.append((i, f"{cur_tag} {where}; {why}"))
        if not prev_ok:
            assert prev is not None
            where = f"is followed by {cur_tag}" if cur is not None else "ends the sentence"
            if self.right[prev[0]] == {NEXT}:
                why = f"in {name}, {prev[0]}- only marks a span ending where one of its type starts"
            else:
                why = f"{name} spans end with {self._marks(self.right, APART)}"
            problems.append((i - 1, f"{prev_tag} {where}; {why}"))
        if prev_ok and cur_ok:
            assert prev is not None and cur is not None
            if SAME in self.right[prev[0]]:
                expected = self._marks(self.left, SAME)
                why = f"{prev_tag} leaves its span open, so {name} expects {expected} next"
            else:
                why = f"{prev_tag} closes its span, so {cur[0]}- has no span to continue"
            problems.append((i, f"{cur_tag} follows {prev_tag}; {why}"))
        return problems


RULES = {name: Rules.derive(table) for name, table in SCHEMES.items()}


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
        for prefix in PREFIXES
        if all(
            SAME not in getattr(rules, side)[prefix]
            for rules in RULES.values()
            if prefix in rules.left
        )
    )


PREFIXES = _prefixes_in_role_order()
OPENS = _never_continues("left")  # B- S- U-: always start a span
CLOSES = _never_continues("right")  # E- S- L- U-: always end the span they are in


def normalise_scheme_name(name: str) -> str:
    """The canonical name of a scheme: case-insensitive, with BIO -> IOB2 and IOBES -> BIOES."""
    key = name.strip().upper() if isinstance(name, str) else ""
    key = ALIASES.get(key, key)
    if key not in SCHEMES:
        aliases = ", ".join(f"{a} (= {b})" for a, b in ALIASES.items())
        raise ConfigError(
            f"unknown tagging scheme {name!r}: choose one of {', '.join(SCHEME_NAMES)} or {aliases}"
        )
    return key


def rules_for(scheme: str) -> Rules:
    return RULES[normalise_scheme_name(scheme)]
