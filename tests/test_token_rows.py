"""Per-token rows remembered between tagging calls: computed once, forgotten when the weights
change, and never a different answer from a tagger that remembers nothing."""

from __future__ import annotations

import numpy as np
import torch
from model_files import tiny_tagger

from tagger.apply.token_rows import TokenRows


def _rows_of(asked: list[list[str]], tokens: list[str]):
    """A compute function giving token t the row [len(t), ord(t[0])] and noting what it was
    asked for."""

    def compute(at: list[int]) -> np.ndarray:
        asked.append([tokens[i] for i in at])
        return np.asarray([[len(tokens[i]), ord(tokens[i][0])] for i in at], dtype=np.float32)

    return compute


def test_a_token_is_computed_once_and_its_row_comes_back_unchanged() -> None:
    rows, asked = TokenRows(), []
    first = ["gearbox", "on", "T-14"]
    table = rows.table(first, _rows_of(asked, first))
    assert table.tolist() == [[0, 0], [7, ord("g")], [2, ord("o")], [4, ord("T")]]
    second = ["on", "yaw", "gearbox"]
    table = rows.table(second, _rows_of(asked, second))
    assert asked == [first, ["yaw"]]
    assert table.tolist() == [[0, 0], [2, ord("o")], [3, ord("y")], [7, ord("g")]]


def test_a_new_key_forgets_every_row() -> None:
    rows, asked = TokenRows(), []
    tokens = ["gearbox", "on"]
    rows.table(tokens, _rows_of(asked, tokens), key=1)
    rows.table(tokens, _rows_of(asked, tokens), key=1)
    rows.table(tokens, _rows_of(asked, tokens), key=2)
    assert asked == [tokens, tokens]


def test_the_store_grows_past_its_first_size_and_stops_at_its_byte_budget() -> None:
    rows, asked = TokenRows(max_bytes=600 * 8), []  # rows of 2 float32: 600 tokens
    tokens = [f"t{i}" for i in range(500)]
    for first in range(0, 500, 100):  # grows 256 -> 512 rows on the way
        part = tokens[first : first + 100]
        rows.table(part, _rows_of(asked, part))
    table = rows.table(tokens, _rows_of(asked, tokens))
    assert len(asked) == 5  # all held
    assert table[1:, 0].tolist() == [len(t) for t in tokens]
    mixed = [*tokens[:50], *(f"u{i}" for i in range(150))]  # 650 would pass the budget
    table = rows.table(mixed, _rows_of(asked, mixed))
    assert asked[-1] == mixed[50:]  # held rows are not computed again...
    assert table[1:, 0].tolist() == [len(t) for t in mixed]
    assert sorted(rows.index) == sorted(mixed)  # ...and the store starts afresh with this call's
    too_many = [f"v{i}" for i in range(700)]  # more than it may ever hold: computed, not kept
    table = rows.table(too_many, _rows_of(asked, too_many))
    assert table.shape == (701, 2) and table[0].tolist() == [0, 0] and len(rows.index) == 0
    assert rows.table(mixed[:3], _rows_of(asked, mixed[:3]))[1:, 0].tolist() == [2, 2, 2]


def _scores(tagger, sentences) -> list[tuple[list[tuple[str, int, int]], np.ndarray]]:
    """Each sentence's spans, and its span scores and certainty (which a token's character
    features computed beside other tokens move in the ninth digit: float32 sums in another
    order)."""
    return [
        ([span[:3] for span in s.spans], np.asarray([*(span[3] for span in s.spans), s.certainty]))
        for s in tagger.predict_sentences(sentences, batch_size=3)
    ]


def _same(a, b) -> bool:
    return all(
        sa == sb and np.allclose(pa, pb, rtol=0, atol=1e-6)
        for (sa, pa), (sb, pb) in zip(a, b, strict=True)
    )


def test_remembered_rows_give_what_a_fresh_tagger_gives_even_after_the_weights_change() -> None:
    sentences = [["Anna", "met", "Bob", "in", "Oslo", "."], ["Bob", "left", "."], ["Oslo"]]
    fresh = tiny_tagger(seed=3)
    remembering = tiny_tagger(seed=3)
    for sentence in sentences:  # fills its store a call at a time
        remembering.predict_sentences([sentence])
    assert len(remembering.token_rows["chars"].index) == 7
    assert _same(_scores(remembering, sentences), _scores(fresh, sentences))
    # An optimizer step changes the weights in place, as training does between dev scorings.
    for tagger in (fresh, remembering):
        with torch.no_grad():
            for p in tagger.net.chars.parameters():
                p.mul_(-3.0)
    changed = _scores(fresh, sentences)
    assert not _same(_scores(tiny_tagger(seed=3), sentences), changed)  # it reached the output
    assert _same(_scores(remembering, sentences), changed)
