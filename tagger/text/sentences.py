"""Tokens -> sentences: where the text that `tagger.text.tokenizer` cut into tokens is cut into
sentences, with the offsets kept.

Blank lines (two line breaks with only separators between, or one hard break such as a form
feed) always end a sentence; a single line break does not. ". ! ?" and their runs end one,
together with closing quotes and brackets glued to them; abbreviations and initials follow the
rules the tokenizer's docstring lists. A sentence longer than `max_sentence_tokens` is cut into
pieces, preferably after , ; : in the second half of a window, each piece marked as cut.
"""

from __future__ import annotations

import bisect
import re

from tagger.text.tokenizer import (
    MAY_END_SENTENCE,
    SEPARATOR_CLASS,
    Rules,
    TextSentence,
    Token,
    TokenizerSettings,
    rules_for,
    tokenize,
)

_DEFAULT = TokenizerSettings()

_TERMINAL = frozenset(".!?\u203d\u2026\u3002\uff01\uff1f\u061f\u0964\u0965")
_ELLIPSIS = frozenset(".\u2026")
_CLOSERS = frozenset({'"', "'", "''", "\u201d", "\u2019", "\u00bb", "\u203a", ")", "]", "}"})
_CUT_AFTER = frozenset({",", ";", ":"})
_TERMINAL_CHAR = re.compile("[.!?\u203d\u2026\u3002\uff01\uff1f\u061f\u0964\u0965]")
# A run of separators that holds a line break; it ends a paragraph when it holds two line
# breaks ("\r\n" counts once) or one hard break (form feed, record separators, U+2029).
_BREAK_RUN = re.compile(f"[\n\r\x0b\x85\u2028\x0c\x1c\x1d\x1e\u2029][{SEPARATOR_CLASS}]*")
_LINE_BREAKS = "\n\r\x0b\x85\u2028"
_HARD_BREAKS = "\x0c\x1c\x1d\x1e\u2029"


def _is_paragraph_gap(run: str) -> bool:
    if any(c in run for c in _HARD_BREAKS):
        return True
    run = run.replace("\r\n", "\n")
    return sum(run.count(c) for c in _LINE_BREAKS) >= 2


def _ends_sentence(tokens: list[Token], i: int, rules: Rules) -> bool:
    """Does the sentence end after token i (not the last token)?"""
    t = tokens[i].text
    if t[0] in _TERMINAL and all(c in _TERMINAL for c in t):
        ellipsis = all(c in _ELLIPSIS for c in t) and (len(t) > 1 or t == "\u2026")
        return not (ellipsis and tokens[i + 1].text[0].islower())
    if len(t) < 2 or not rules.keeps_period(t):
        return False
    # A word that kept its period: a listed abbreviation or initial, or a dotted abbreviation.
    if t in rules.abbreviations and t not in MAY_END_SENTENCE:
        return False
    if len(t) == 2 and t[0].isupper():
        return False
    return tokens[i + 1].text[0].isupper()


def _cut(n: int, tokens: list[Token], lo: int, hi: int) -> list[tuple[int, int, bool]]:
    """Cut tokens[lo:hi] into pieces of at most n tokens, preferring to cut after , ; : in the
    second half of a window; returns (lo, hi, cut) triples."""
    out: list[tuple[int, int, bool]] = []
    while hi - lo > n:
        end = lo + n
        for k in range(end, lo + n // 2, -1):
            if tokens[k - 1].text in _CUT_AFTER:
                end = k
                break
        out.append((lo, end, True))
        lo = end
    out.append((lo, hi, False))
    return out


def split_sentences(text: str, settings: TokenizerSettings = _DEFAULT) -> list[TextSentence]:
    """Tokenise `text` and group the tokens into sentences.

    Blank lines (two line breaks with only spaces between) always end a sentence; a single line
    break does not. ". ! ?" and their runs end a sentence, together with closing quotes and
    brackets glued to them; abbreviations and initials do not (see the module docstring).
    """
    tokens = tokenize(text, settings)
    if not tokens:
        return []
    rules = rules_for(settings)
    n = len(tokens)
    ends = [t.end for t in tokens]
    cuts: set[int] = {n}  # sentence ends, as token indices (exclusive)
    for m in _BREAK_RUN.finditer(text):
        if _is_paragraph_gap(m.group()):
            # The first token after the gap is the first one ending after it.
            k = bisect.bisect_right(ends, m.end())
            if 0 < k < n:
                cuts.add(k)
    last = -1
    for m in _TERMINAL_CHAR.finditer(text):
        # Only a token whose last character is . ! ? (or the like) can end a sentence.
        k = bisect.bisect_left(ends, m.end())
        if k == last or k >= n - 1 or ends[k] != m.end():
            continue
        last = k
        if _ends_sentence(tokens, k, rules):
            j = k + 1
            while j < n and tokens[j].text in _CLOSERS and tokens[j].start == ends[j - 1]:
                j += 1
            cuts.add(j)
    sentences: list[TextSentence] = []
    lo = 0
    limit = settings.max_sentence_tokens
    for hi in sorted(cuts):
        if hi <= lo:
            continue
        for a, b, cut in _cut(limit, tokens, lo, hi):
            piece = tuple(tokens[a:b])
            sentences.append(TextSentence(piece, piece[0].start, piece[-1].end, cut))
        lo = hi
    return sentences
