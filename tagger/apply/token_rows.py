"""What the network computes for a token alone (its character features, its frozen vector),
remembered between tagging calls, so a service tagging a few sentences a call computes a token's
row once rather than once per call.

Such a row depends on the token and the weights only, not on its sentence; the store is keyed
by a caller-given token of those weights and forgets everything when the key changes (a network
still being trained) or when it would pass `ROW_BYTES`. No torch here: the export backend uses
it too.
"""

from __future__ import annotations

from collections.abc import Callable, Hashable, Sequence

import numpy as np

ROW_BYTES = 16 * 2**20  # per store: 65,536 tokens of 64 float32 features, 13,981 of 300


class TokenRows:
    """token -> one row, computed by the caller for the tokens not yet held."""

    def __init__(self, max_bytes: int = ROW_BYTES) -> None:
        self.max_bytes = max_bytes
        self.key: Hashable = None
        self.index: dict[str, int] = {}  # token -> row of `store`; row 0 is the padding's zeros
        self.store: np.ndarray | None = None  # (capacity, width)

    def clear(self) -> None:
        """Forget every row."""
        self.index, self.store = {}, None

    def table(
        self,
        tokens: Sequence[str],
        compute: Callable[[list[int]], np.ndarray],
        key: Hashable = None,
    ) -> np.ndarray:
        """(N+1, width): row 0 zeros (padding), then the row of each of the N >= 1 distinct
        ``tokens``. ``compute(positions)`` gives the rows (M, width) of the tokens at those
        positions of ``tokens``; it is called once, for the tokens not held (none: not called)."""
        if key != self.key:
            self.clear()
            self.key = key
        missing = [i for i, token in enumerate(tokens) if token not in self.index]
        if not missing:
            assert self.store is not None
            return self.store[self._rows_of(tokens)]
        computed = compute(missing)  # (M, width)
        table = np.zeros((len(tokens) + 1, computed.shape[1]), dtype=computed.dtype)
        table[np.asarray(missing) + 1] = computed
        if self.store is not None:
            held = [i for i, token in enumerate(tokens) if token in self.index]
            table[np.asarray(held, dtype=np.int64) + 1] = self.store[
                self._rows_of([tokens[i] for i in held])[1:]
            ]
        limit = self.max_bytes // table[0].nbytes  # tokens the store may hold
        if len(self.index) + len(missing) > limit:  # start afresh with this call's tokens
            self.clear()
            missing = list(range(len(tokens))) if len(tokens) <= limit else []
        if missing:
            self._keep([tokens[i] for i in missing], table[np.asarray(missing) + 1], limit)
        return table

    def _rows_of(self, tokens: Sequence[str]) -> np.ndarray:
        """Row 0, then each token's row of `store`."""
        where = np.fromiter((self.index[t] for t in tokens), dtype=np.int64, count=len(tokens))
        return np.concatenate([[0], where])

    def _keep(self, tokens: list[str], rows: np.ndarray, limit: int) -> None:
        first = len(self.index) + 1
        needed = first + len(tokens)
        if self.store is None or needed > len(self.store):
            # doubling: a store grown a few rows at a time copies each row a bounded number of times
            capacity = max(needed, 2 * (0 if self.store is None else len(self.store)), 256)
            grown = np.zeros((min(capacity, limit + 1), rows.shape[1]), dtype=rows.dtype)
            if self.store is not None:
                grown[:first] = self.store[:first]
            self.store = grown
        self.store[first:needed] = rows
        self.index.update(zip(tokens, range(first, needed), strict=True))
