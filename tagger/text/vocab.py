"""Vocabularies (words, characters, labels) and the word normalisation rules a model records."""

from __future__ import annotations

from collections import Counter
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from tagger.text.char_context import CharLMSpec
    from tagger.text.subword import SubwordIndex

PAD = "<pad>"
UNK = "<unk>"
MAX_TOKEN_CHARS = (
    24  # longer tokens keep their first and last 12 characters: affixes carry the signal
)


def normalise_word(word: str, lowercase: bool, digits_to_zero: bool) -> str:
    """The form a word is looked up under; characters always see the raw token."""
    if lowercase:
        word = word.lower()
    if digits_to_zero:
        word = "".join("0" if ch.isdigit() else ch for ch in word)
    return word


class Vocab:
    """A fixed list of items; index 0 is padding and 1 the unknown item when ``specials`` is set."""

    def __init__(self, items: Iterable[str], specials: bool = True) -> None:
        self.specials = specials
        self.itos: list[str] = [PAD, UNK] if specials else []
        seen = set(self.itos)
        for item in items:
            if item not in seen:
                seen.add(item)
                self.itos.append(item)
        self.stoi = {item: i for i, item in enumerate(self.itos)}

    def __len__(self) -> int:
        return len(self.itos)

    def __contains__(self, item: str) -> bool:
        return item in self.stoi

    def index(self, item: str) -> int:
        if self.specials:
            return self.stoi.get(item, 1)
        return self.stoi[item]

    def encode(self, items: Sequence[str]) -> list[int]:
        return [self.index(item) for item in items]

    def decode(self, ids: Iterable[int]) -> list[str]:
        return [self.itos[i] for i in ids]

    def to_dict(self) -> dict:
        return {"items": self.itos[2:] if self.specials else self.itos, "specials": self.specials}

    @classmethod
    def from_dict(cls, data: dict) -> Vocab:
        return cls(data["items"], specials=data["specials"])


def clip_chars(token: str) -> str:
    """The characters of ``token`` the character encoder reads (see MAX_TOKEN_CHARS)."""
    if len(token) <= MAX_TOKEN_CHARS:
        return token
    half = MAX_TOKEN_CHARS // 2
    return token[:half] + token[-half:]


@dataclass
class Vocabularies:
    words: Vocab
    chars: Vocab
    labels: Vocab  # labels of the scheme the network learns, "O" first; no specials
    lowercase: bool
    digits_to_zero: bool
    # the rows of a frozen vector table for any token (pretrained vectors); None: no such table
    subwords: SubwordIndex | None = None
    # the characters and sizes of a frozen character language model; None: no such model
    char_lm: CharLMSpec | None = None

    def word_key(self, token: str) -> str:
        return normalise_word(token, self.lowercase, self.digits_to_zero)

    def char_ids(self, token: str) -> list[int]:
        """The character ids the character encoder reads for ``token`` (never empty)."""
        return self.chars.encode(clip_chars(token)) or [1]

    def to_dict(self) -> dict:
        return {
            "words": self.words.to_dict(),
            "chars": self.chars.to_dict(),
            "labels": self.labels.to_dict(),
            "lowercase": self.lowercase,
            "digits_to_zero": self.digits_to_zero,
            **({"subwords": self.subwords.to_dict()} if self.subwords is not None else {}),
            **({"char_lm": self.char_lm.to_dict()} if self.char_lm is not None else {}),
        }

    @classmethod
    def from_dict(cls, data: dict) -> Vocabularies:
        from tagger.text.char_context import CharLMSpec
        from tagger.text.subword import SubwordIndex

        return cls(
            words=Vocab.from_dict(data["words"]),
            chars=Vocab.from_dict(data["chars"]),
            labels=Vocab.from_dict(data["labels"]),
            lowercase=data["lowercase"],
            digits_to_zero=data["digits_to_zero"],
            subwords=SubwordIndex.from_dict(data["subwords"]) if "subwords" in data else None,
            char_lm=CharLMSpec.from_dict(data["char_lm"]) if "char_lm" in data else None,
        )


def build_vocabularies(
    token_lists: Iterable[Sequence[str]],
    labels: Sequence[str],
    lowercase: bool,
    digits_to_zero: bool,
    min_word_count: int = 1,
    extra_words: Iterable[str] = (),
) -> tuple[Vocabularies, Counter[str]]:
    """Vocabularies from training tokens; also returns the word counts (for unknown-word replacement).

    Words seen fewer than ``min_word_count`` times are left out: they are read as the unknown word
    (characters and context only) and the model file, which stores the word list in plain text,
    never holds them. ``extra_words`` (e.g. the words of pretrained vectors) join the word list
    whatever their count.
    """
    word_counts: Counter[str] = Counter()
    char_counts: Counter[str] = Counter()
    for tokens in token_lists:
        for token in tokens:
            word_counts[normalise_word(token, lowercase, digits_to_zero)] += 1
            char_counts.update(token)
    words = [
        w
        for w, c in sorted(word_counts.items(), key=lambda kv: (-kv[1], kv[0]))
        if c >= min_word_count
    ]
    words.extend(sorted(set(extra_words) - set(words)))
    chars = [ch for ch, _ in sorted(char_counts.items(), key=lambda kv: (-kv[1], kv[0]))]
    vocabs = Vocabularies(
        words=Vocab(words),
        chars=Vocab(chars),
        labels=Vocab(labels, specials=False),
        lowercase=lowercase,
        digits_to_zero=digits_to_zero,
    )
    return vocabs, word_counts
