"""Raw text -> tokens and sentences with exact character offsets, for tagging new documents.

This module owns the rule-based tokeniser used at tagging time (its sentence splitter is
`tagger.text.sentences`) and the `TokenizerSettings` stored in model files. Tokens follow the conventions of annotated column
corpora (Penn-Treebank-like): punctuation split from words, clitics split ("do" "n't", "crew" "'s"),
numbers, abbreviations, URLs, e-mail addresses, @mentions and #hashtags kept whole.

The invariant everything else relies on: for every token `text[start:end] == token.text`; tokens
are non-empty, in order and non-overlapping; every character that is not a *separator* lies in
exactly one token; sentences partition the tokens in order.

Decisions (documented once, here):
- Separators are Unicode whitespace (`str.isspace`: space, tabs, line breaks, NBSP, U+3000, ...)
  and the control characters (category Cc, e.g. NUL, ESC, DEL): a control character never becomes
  a token, it separates tokens like a space.
- Combining marks (Mn, Mc, Me), format characters (Cf: zero-width space and joiners, the byte-order
  mark, soft hyphen, bidirectional marks) and emoji skin-tone modifiers are never separators: they
  stay in the token they follow, so "foo\\u200bbar" is one token (corpora contain such tokens). A
  mark with nothing to attach to becomes a token of its own. Emoji joined by ZWJ and pairs of
  regional-indicator flags are one token.
- A period between two word characters never splits ("example.org", "v1.2.3", "U.S"); a period
  after a word is split off unless the word plus period is a listed abbreviation (compared exactly,
  or with its first letter upper-cased), a dotted abbreviation of short letter groups ("e.g.",
  "U.S.", "Ph.D.") or a single capital initial ("J.").
- Hyphens, slashes, apostrophes and "&" between word characters join ("T-14", "mm/s", "1/2",
  "O'Brien", "AT&T"); `split_hyphens` splits at hyphens only. Clitics are then split off the end
  ("T-14's" -> "T-14" "'s"; "can't" -> "ca" "n't" as in the treebanks). A sign is part of a
  number after a non-word ("-3.5", but "10-12" is one token).
- Commas and colons join digits only ("1,450", "7,2", "10:30"). "%" and currency signs are split.
- A number directly followed by a known unit ("7.2mm", "85°C", "12kV", "3mm/s") is split unless
  `keep_number_units`; other letter suffixes stay ("1st", "1990s", "3D", "4x4").
- Runs of ". ! ?" (and "…") are one token ("...", "?!"), as are "--" and runs of dashes.
- "etc." is a listed abbreviation (one token); like "Inc.", "Ltd.", "Co.", "Corp.", "Jr.", "Sr."
  and unlisted dotted abbreviations ("U.S.") it ends a sentence only when the next token starts
  with an upper-case letter. Other listed abbreviations and initials never end a sentence.
- An ellipsis followed by a lower-case word does not end the sentence ("Wait... what").
"""

from __future__ import annotations

import functools
import re
import unicodedata
from collections.abc import Callable, Mapping
from dataclasses import dataclass, fields
from typing import Any

from tagger.errors import ConfigError

__all__ = [
    "DEFAULT_ABBREVIATIONS",
    "TextSentence",
    "Token",
    "TokenizerSettings",
    "is_separator",
    "tokenize",
]

DEFAULT_ABBREVIATIONS: tuple[str, ...] = (
    # titles
    "Mr.", "Mrs.", "Ms.", "Dr.", "Prof.", "Sr.", "Jr.", "St.", "Mt.", "Gen.", "Gov.", "Sen.",
    "Rep.", "Rev.", "Sgt.", "Capt.", "Lt.", "Col.", "Maj.", "Hon.", "Messrs.", "Sens.", "Reps.",
    # Latin and scholarly
    "e.g.", "i.e.", "etc.", "vs.", "cf.", "ca.", "approx.", "al.", "viz.", "resp.", "esp.",
    "incl.", "excl.", "fig.", "figs.", "eq.", "eqs.", "ref.", "refs.", "vol.", "vols.", "p.",
    "pp.", "ch.", "sec.", "v.", "No.", "Nos.", "Ph.D.",
    # organisations
    "Inc.", "Ltd.", "Co.", "Corp.", "Bros.", "Dept.", "Univ.", "Assn.",
    # months
    "Jan.", "Feb.", "Mar.", "Apr.", "Jun.", "Jul.", "Aug.", "Sep.", "Sept.", "Oct.", "Nov.",
    "Dec.",
    # measures
    "min.", "max.", "avg.", "est.",
    # US states as written in newswire
    "Ariz.", "Calif.", "Colo.", "Conn.", "Fla.", "Ga.", "Ill.", "Ind.", "Kan.", "Ky.", "La.", "Md.",
    "Mass.", "Mich.", "Minn.", "Miss.", "Mo.", "Mont.", "Neb.", "Nev.", "Okla.", "Ore.", "Pa.",
    "Tenn.", "Tex.", "Va.", "Vt.", "Wash.", "Wis.", "Wyo.",
)  # fmt: skip

# Listed abbreviations that also commonly close a sentence: they end one only before a capital.
MAY_END_SENTENCE = frozenset(
    {"etc.", "Etc.", "Inc.", "Ltd.", "Co.", "Corp.", "Jr.", "Sr.", "Bros."}
)


@dataclass(frozen=True)
class TokenizerSettings:
    """How raw text is cut into tokens and sentences; stored in model files as a plain dict."""

    split_hyphens: bool = False  # "T-14" -> "T" "-" "14" (biomedical corpora do this)
    split_clitics: bool = True  # "don't" -> "do" "n't"; "crew's" -> "crew" "'s"
    keep_number_units: bool = False  # "7.2mm", "85°C" stay whole
    abbreviations: tuple[str, ...] = DEFAULT_ABBREVIATIONS  # keep their period, see above
    max_sentence_tokens: int = 300  # longer sentences are cut (bounds batch memory)

    def __post_init__(self) -> None:
        for name in ("split_hyphens", "split_clitics", "keep_number_units"):
            if not isinstance(getattr(self, name), bool):
                raise ConfigError(f"tokenizer setting '{name}' must be true or false")
        mst = self.max_sentence_tokens
        if isinstance(mst, bool) or not isinstance(mst, int) or mst < 1:
            raise ConfigError("tokenizer setting 'max_sentence_tokens' must be an integer >= 1")
        abbrs = self.abbreviations
        if isinstance(abbrs, str) or not isinstance(abbrs, (tuple, list)):
            raise ConfigError("tokenizer setting 'abbreviations' must be a list of strings")
        for a in abbrs:
            if (
                not isinstance(a, str)
                or not a.endswith(".")
                or not a[:-1].strip(".")
                or any(is_separator(c) for c in a)
            ):
                raise ConfigError(
                    f"tokenizer setting 'abbreviations': {a!r} is not a word ending in '.'"
                )
        # Lists (from JSON) become tuples so the settings stay hashable.
        object.__setattr__(self, "abbreviations", tuple(abbrs))

    def to_dict(self) -> dict[str, Any]:
        """A JSON-ready dict; `from_dict(to_dict())` gives back equal settings."""
        return {
            "split_hyphens": self.split_hyphens,
            "split_clitics": self.split_clitics,
            "keep_number_units": self.keep_number_units,
            "abbreviations": list(self.abbreviations),
            "max_sentence_tokens": self.max_sentence_tokens,
        }

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> TokenizerSettings:
        """Settings from a dict; missing keys take defaults, unknown keys raise ConfigError."""
        if not isinstance(d, Mapping):
            raise ConfigError("tokenizer settings must be a table of key = value pairs")
        known = {f.name for f in fields(cls)}
        for key in d:
            if key not in known:
                raise ConfigError(
                    f"unknown tokenizer setting '{key}' (known: {', '.join(sorted(known))})"
                )
        return cls(**dict(d))


@dataclass(frozen=True, slots=True)
class Token:
    """One token; `text == source[start:end]` (offsets in code points, end exclusive)."""

    text: str
    start: int
    end: int


@dataclass(frozen=True)
class TextSentence:
    """A run of tokens; `cut` is True when the sentence was longer than `max_sentence_tokens`
    and was cut after this piece (the next TextSentence continues it)."""

    tokens: tuple[Token, ...]
    start: int
    end: int
    cut: bool = False


def is_separator(ch: str) -> bool:
    """True for the characters that separate tokens and never belong to one."""
    return ch.isspace() or unicodedata.category(ch) == "Cc"


# ---------------------------------------------------------------------------------------------
# Character classes

SEPARATOR_CLASS = r"\s\x00-\x1f\x7f-\x9f"  # regex class body: whitespace + control characters (Cc)


def _class_body(ranges: list[tuple[int, int]]) -> str:
    def esc(c: int) -> str:
        return f"\\U{c:08x}" if c > 0xFFFF else f"\\u{c:04x}"

    return "".join(esc(a) if a == b else f"{esc(a)}-{esc(b)}" for a, b in ranges)


def _runs(cps: list[int], bridge: Callable[[int], bool]) -> list[tuple[int, int]]:
    """Sorted code points -> ranges, merging gaps whose every code point passes `bridge`."""
    out: list[list[int]] = []
    for c in cps:
        if out and all(bridge(g) for g in range(out[-1][1] + 1, c)):
            out[-1][1] = c
        else:
            out.append([c, c])
    return [(a, b) for a, b in out]


@functools.cache
def _extend_classes() -> tuple[str, str, str]:
    """Class bodies for characters that extend a token (marks, format characters, emoji
    modifiers): (in the BMP, above the BMP, above the BMP merged across word characters).

    Marks and format characters live in the BMP, the SMP (scripts, emoji modifiers) and plane 14
    (tags, variation selectors); the other planes hold none. Above the BMP the regex engine checks
    a class's ranges one by one, so those ranges are kept apart (tried only for such characters)
    and merged across unassigned code points, and for words also across word characters (already
    matched by \\w).
    """
    cat = unicodedata.category
    cps = [
        c
        for lo, hi in ((0, 0x20000), (0xE0000, 0xE1000))
        for c in range(lo, hi)
        if cat(chr(c)) in ("Mn", "Mc", "Me", "Cf") and not chr(c).isspace()
    ]
    cps.extend(range(0x1F3FB, 0x1F400))  # emoji skin-tone modifiers (category Sk)
    cps.sort()
    bmp = [c for c in cps if c <= 0xFFFF]
    astral = [c for c in cps if c > 0xFFFF]

    def unassigned(c: int) -> bool:
        return cat(chr(c)) == "Cn"

    def wordish(c: int) -> bool:
        ch = chr(c)
        return cat(ch) == "Cn" or ch.isalnum() or ch == "_"

    return (
        _class_body(_runs(bmp, unassigned)),
        _class_body(_runs(astral, unassigned)),
        _class_body(_runs(astral, wordish)),
    )


# ---------------------------------------------------------------------------------------------
# The master pattern: separators, then one of the alternatives in priority order (or the end of
# the text). Consuming the separators inside the match spares the engine from trying every
# alternative at every space. The group that matched names the rule.

_ASTRAL = "\\U00010000-\\U0010ffff"


@functools.cache
def _master() -> re.Pattern[str]:
    xb, xa, wxa = _extend_classes()
    # Astral classes are tried only after a one-range test for an astral character.
    x = f"(?:[{xb}]|(?=[{_ASTRAL}])[{xa}])"  # one extending character
    wx_run = f"(?:[\\w{xb}]++|(?=[{_ASTRAL}])[{wxa}])"  # word characters with their marks
    nonsep_nonword = f"[^{SEPARATOR_CLASS}\\w]"
    hy = "\\-\u2010\u2011"  # hyphen-minus, hyphen, non-breaking hyphen
    joiner = f"(?:[.'\u2019/&{hy}]|(?<=\\d)[,:])(?=\\w)"
    # The sign's look-behind comes after the sign so that most positions fail on one character.
    sign = "[-+\u2212\u00b1](?<![\\w.,)\\]}][-+\u2212\u00b1])"
    number = "(?:\\d++(?:[.,]\\d++)*+|\\.\\d++)"
    url_char = (
        f"[^{SEPARATOR_CLASS}<>\"'()\\[\\]{{}}.,;:!?\u201c\u201d\u2018\u2019\u00ab\u00bb\u2026]"
    )
    url = (
        "(?i:(?:https?|ftps?|sftp|file|ssh|git)://|www\\d{0,3}\\.)"
        f"(?:{url_char}|[.,;:!?']++(?={url_char}|\\()|\\({url_char}*+\\))++"
    )
    email = "(?<![\\w.+\\-])\\w(?:[\\w.+\\-]*\\w)?@\\w[\\w\\-]*+(?:\\.\\w[\\w\\-]*+)++"
    mention = f"@(?<![\\w@]@)\\w{wx_run}*+"
    hashtag = f"#(?<![\\w#&]#)(?=[\\w{xb}{wxa}]*?[^\\W\\d]){wx_run}++"
    emoticon = (
        "(?=[:;=<^\\-])(?<!\\S)(?:[:;=][-'^o]?[)(\\]\\[dDpPoO/\\\\|*3]|<3|\\^_\\^|-_-)(?!\\S)"
    )
    degree = f"(?:{sign})?{number}(?:\u00b0[CFK]?|[\u2103\u2109])(?!\\w)"
    unit = "\u00b0[CFK](?!\\w)"
    # Fast paths, tried first: a plain word or plain digits that no later rule would extend or
    # split (not followed by a period, a joiner, the start of an e-mail address or URL, or any
    # astral character, which might be a mark), and a plain word followed by one period (a
    # sentence end or an abbreviation: decided in Python). Anything else falls to `chain`.
    stop = f"(?![.{_ASTRAL}]|[\u2019'/&+@{hy}]\\w|(?<=\\d)[,:]\\d|:/)"
    word = f"[^\\W\\d][\\w{xb}]*+{stop}"
    digits = f"\\d++(?![\\w{xb}\u00b0\u2103\u2109]){stop}"
    word_period = f"[^\\W\\d][\\w{xb}]*+\\.(?![.\\w{xb}{_ASTRAL}])"
    # Everything else made of word characters: joined pieces, signs, a trailing period.
    chain = f"(?:(?:{sign})?\\.?(?=\\d))?{wx_run}++(?:{joiner}{wx_run}++)*+(?:\\.(?!\\.))?"
    punct = (
        "(?:[.!?\u203d\u2026\u3002\uff01\uff1f\u061f\u0964\u0965]++|--++|[\u2013\u2014\u2015]++"
        f"|''|``|[\\U0001F1E6-\\U0001F1FF]{{2}}){x}*+"
    )
    # A clitic after a kept period or a bracket: "Co.'s", "(AT&T)'s".
    clitic = "['\u2019](?<=[.)\\]]['\u2019])(?i:s|re|ve|ll|d|m)(?!\\w)"
    other = f"{nonsep_nonword}{x}*+(?:(?<=\u200d){nonsep_nonword}{x}*+)*+"
    alternatives = [
        ("word", word),
        ("digits", digits),
        ("wperiod", word_period),
        ("url", url),
        ("email", email),
        ("tag", f"{mention}|{hashtag}"),
        ("emo", emoticon),
        ("deg", degree),
        ("unit", unit),
        ("chain", chain),
        ("punct", punct),
        ("clitic", clitic),
        ("other", other),
        ("end", "\\Z"),
    ]
    body = "|".join(f"(?P<{name}>{pat})" for name, pat in alternatives)
    return re.compile(f"[{SEPARATOR_CLASS}]*+(?:{body})")


@functools.cache
def _actions() -> tuple[int, ...]:
    """What tokenize() does for each group number of the master pattern (index 0 unused)."""
    special = {"wperiod": _WPERIOD, "chain": _CHAIN, "deg": _DEGREE, "end": _END}
    groups = _master().groupindex
    actions = [_PLAIN] * (max(groups.values()) + 1)
    for name, i in groups.items():
        actions[i] = special.get(name, _PLAIN)
    return tuple(actions)


_PLAIN, _WPERIOD, _CHAIN, _DEGREE, _END = range(5)


# A short-letter-group dotted abbreviation without its final period: "e.g", "U.S", "Ph.D".
_DOTTED = re.compile(r"[^\W\d_]{1,2}(?:\.[^\W\d_]{1,2})+")
_HYPHEN_SPLIT = re.compile("(?<=\\w)([\\-\u2010\u2011])(?=\\w)")
_CLITIC = re.compile("(?is)(.*\\w)(n['\u2019]t|['\u2019](?:s|re|ve|ll|d|m))")

# Units that are split from a number glued to them ("7.2mm" -> "7.2" "mm").
_PREFIXED = "m|g|s|A|V|W|Wh|VA|Hz|N|Pa|J|L|l|eV|B|bar|F|T|\u03a9|Ohm"
_UNIT_PART = (
    f"(?:[pn\u00b5\u03bcumcdkMGT]?(?:{_PREFIXED})|mol|h|min|rpm|psi|mph|kph|ft|lbs?|oz|mi|yd"
    "|dB|dBA|ppm|ppb|mmHg|Nm|kWh|MWh|GWh|mAh|px|pt)(?:[\u00b2\u00b3]|\\^?[23])?"
)
_UNIT = re.compile(f"{_UNIT_PART}(?:/{_UNIT_PART})*")
# Suffixes that look like units but are more often labels, plurals or times: "4B", "1990s", "5pm".
_NOT_UNITS = frozenset({"B", "F", "T", "s", "pm"})
_NUM_UNIT = re.compile(
    "([-+\u2212\u00b1]?(?:\\.\\d+|\\d+(?:[.,:/]\\d+)*))([^\\W\\d_][\\w/\u00b2\u00b3^]*)"
)

_Piece = tuple[str, int]  # (text, start)


class Rules:
    """Post-processing for one TokenizerSettings: the parts of a rule that depend on settings."""

    def __init__(self, settings: TokenizerSettings) -> None:
        self.settings = settings
        abbrs = set(settings.abbreviations)
        abbrs.update(a[0].upper() + a[1:] for a in settings.abbreviations)
        self.abbreviations = frozenset(abbrs)

    def keeps_period(self, s: str) -> bool:
        """Does the word-plus-period `s` keep its period (an abbreviation or initial)?"""
        core = s[:-1]
        return (
            s in self.abbreviations
            or (len(core) == 1 and core.isupper())
            or _DOTTED.fullmatch(core) is not None
        )

    def chain(self, s: str, start: int) -> list[_Piece]:
        """Split one joined run of word characters into tokens."""
        tail: list[_Piece] = []
        if len(s) > 1 and s[-1] == "." and s[-2] != ".":
            if self.keeps_period(s):
                return [(s, start)]
            s = s[:-1]
            tail = [(".", start + len(s))]
        if self.settings.split_hyphens and ("-" in s or "\u2010" in s or "\u2011" in s):
            pieces: list[_Piece] = []
            pos = start
            for part in _HYPHEN_SPLIT.split(s):
                if part:
                    pieces.append((part, pos))
                    pos += len(part)
        else:
            pieces = [(s, start)]
        out: list[_Piece] = []
        for part, pos in pieces:
            out.extend(self._word(part, pos))
        out.extend(tail)
        return out

    def _word(self, s: str, start: int) -> list[_Piece]:
        if self.settings.split_clitics and ("'" in s or "\u2019" in s):
            clitics: list[_Piece] = []
            while (m := _CLITIC.fullmatch(s)) is not None:
                clitics.append((m.group(2), start + m.start(2)))
                s = m.group(1)
            return self._number(s, start) + clitics[::-1]
        return self._number(s, start)

    def _number(self, s: str, start: int) -> list[_Piece]:
        if self.settings.keep_number_units or not (s[0].isdigit() or s[0] in "-+.\u2212\u00b1"):
            return [(s, start)]
        m = _NUM_UNIT.fullmatch(s)
        if m is None:
            return [(s, start)]
        unit = m.group(2)
        if unit in _NOT_UNITS or _UNIT.fullmatch(unit) is None:
            return [(s, start)]
        return [(m.group(1), start), (unit, start + m.start(2))]

    def degree(self, s: str, start: int) -> list[_Piece]:
        """Split "85°C" into "85" "°C" unless number units are kept."""
        if self.settings.keep_number_units:
            return [(s, start)]
        i = next(i for i, c in enumerate(s) if c in "\u00b0\u2103\u2109")
        return [(s[:i], start), (s[i:], start + i)]


@functools.lru_cache(maxsize=32)
def rules_for(settings: TokenizerSettings) -> Rules:
    return Rules(settings)


_DEFAULT = TokenizerSettings()
# The slot descriptors of the frozen Token: setting them directly builds the same object as
# Token(text, start, end) without the frozen __init__ (three object.__setattr__ calls), which is
# worth ~20% of tokenize(). Only ever applied to a Token that is being built.
_new = object.__new__
_set_text = Token.text.__set__  # type: ignore[attr-defined]
_set_start = Token.start.__set__  # type: ignore[attr-defined]
_set_end = Token.end.__set__  # type: ignore[attr-defined]


def _token(text: str, start: int, end: int) -> Token:
    t = _new(Token)
    _set_text(t, text)
    _set_start(t, start)
    _set_end(t, end)
    return t


def tokenize(text: str, settings: TokenizerSettings = _DEFAULT) -> list[Token]:
    """Cut `text` into tokens with character offsets (see the module docstring for the rules)."""
    rules = rules_for(settings)
    abbreviations = rules.abbreviations
    actions = _actions()
    tokens: list[Token] = []
    append = tokens.append
    new, set_text, set_start, set_end = _new, _set_text, _set_start, _set_end
    for m in _master().finditer(text):
        group = m.lastindex
        s, e = m.span(group)
        action = actions[group]  # type: ignore[index]
        if action == _PLAIN:
            # _token inlined: this branch runs for most tokens.
            tok = new(Token)
            set_text(tok, text[s:e])
            set_start(tok, s)
            set_end(tok, e)
            append(tok)
        elif action == _WPERIOD:
            piece = text[s:e]
            if piece in abbreviations or (e - s == 2 and piece[0].isupper()):
                append(_token(piece, s, e))
            else:
                append(_token(piece[:-1], s, e - 1))
                append(_token(".", e - 1, e))
        elif action != _END:
            piece = text[s:e]
            parts = rules.chain(piece, s) if action == _CHAIN else rules.degree(piece, s)
            for t, ps in parts:
                append(_token(t, ps, ps + len(t)))
    return tokens
