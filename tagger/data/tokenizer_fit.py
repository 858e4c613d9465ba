"""How the tokens of annotated sentences fit the tokenizer that cuts raw text at tagging time: which
annotated tokens it would cut into pieces ("106.9°C" -> "106.9" "°C") or not read as a token at
all (a token of no-break spaces). Part of the `check` report.

Column files do not record where the original text had spaces, so each sentence is written out
with a space between its tokens and cut again. A token counts as fitting when the tokenizer gives
it back whole there, or when it is glued to the token before or after it (as clitics and closing
punctuation are in running text: "'s" alone may come back as "'" "s", but "crew's" gives "crew"
"'s"). Since a space always ends a token, the tokenizer never joins two annotated tokens in
this reading; a corpus that splits what the tokenizer keeps whole ("T" "-" "14" where the
tokenizer keeps "T-14") is not found this way.

The tokenizer comes in as a function from text to (start, end) character offsets, so this module
needs nothing of `tagger.text`; the command line passes the tagging tokenizer with the settings
it would use.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

from tagger.data.findings import Examples

Tokenizer = Callable[[str], Sequence[tuple[int, int]]]

# Distinct tokens counted for "most frequent"; more are still counted in the totals.
MAX_FORMS = 10_000
# The most frequent tokens shown.
SHOWN_FORMS = 5


@dataclass
class TokenizerFit:
    """The annotated tokens of one file that the tokenizer would not give back whole."""

    tokenizer: Tokenizer
    limit: int
    tokens: int = 0
    split: Examples = field(init=False)
    lost: Examples = field(init=False)
    forms: Counter[str] = field(default_factory=Counter)
    pieces: dict[str, list[str]] = field(default_factory=dict)

    def __post_init__(self) -> None:
        self.split = Examples(self.limit)
        self.lost = Examples(self.limit)

    def add(self, tokens: Sequence[str], line_numbers: Sequence[int]) -> None:
        """Cut one annotated sentence again and count the tokens that do not come back whole."""
        text = " ".join(tokens)
        found = self.tokenizer(text)
        self.tokens += len(tokens)
        start = 0
        next_piece = 0
        for index, token in enumerate(tokens):
            end = start + len(token)
            inside: list[tuple[int, int]] = []
            while next_piece < len(found) and found[next_piece][0] < end:
                inside.append(found[next_piece])
                next_piece += 1
            if inside != [(start, end)] and not self._fits_glued(tokens, index):
                pieces = [text[a:b] for a, b in inside]
                self._count(token, pieces, line_numbers[index])
            start = end + 1

    def _fits_glued(self, tokens: Sequence[str], index: int) -> bool:
        """Does the token come back whole when glued to the token before or after it?"""
        token = tokens[index]
        if index > 0:
            before = tokens[index - 1]
            glued = before + token
            if (len(before), len(glued)) in self.tokenizer(glued):
                return True
        if index + 1 < len(tokens):
            glued = token + tokens[index + 1]
            if (0, len(token)) in self.tokenizer(glued):
                return True
        return False

    def _count(self, token: str, pieces: list[str], line: int) -> None:
        finding = self.split if pieces else self.lost
        finding.add(lambda: {"line": line, "token": token, "pieces": pieces})
        if token in self.forms or len(self.forms) < MAX_FORMS:
            self.forms[token] += 1
            self.pieces.setdefault(token, pieces)

    def as_dict(self) -> dict[str, Any]:
        """{"tokens" (annotated tokens read), "split", "lost" ({"count", "examples"}, examples
        {"line", "token", "pieces"}), "most_frequent" ([{"token", "count", "pieces"}])}."""
        ranked = sorted(self.forms.items(), key=lambda kv: (-kv[1], kv[0]))[:SHOWN_FORMS]
        return {
            "tokens": self.tokens,
            "split": self.split.as_dict(),
            "lost": self.lost.as_dict(),
            "most_frequent": [
                {"token": token, "count": n, "pieces": self.pieces[token]} for token, n in ranked
            ],
        }
