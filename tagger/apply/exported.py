"""`ExportedTagger`: a `Tagger` whose network runs as ONNX graphs in onnxruntime and whose labels
are decoded in numpy (`tagger.apply.label_decoding`), read from an export file
(`tagger.apply.export_file`). This module and what it imports never import torch, so tagging
with `--backend onnx` works where torch is not installed.

Everything around the network is the torch tagger's own: tokenising, feature ids, the engine and
output formats, span scores, the review flag's certainty and the calibration temperature. The
work per call follows `tagger.apply.predict`: each distinct token's word and character ids (and
its rows of a frozen vector table) are looked up once, its character features ("characters"
graph) and table vector ("vectors" graph) computed once and remembered for later calls
(`tagger.apply.token_rows`), then sentences of similar length are
batched through the character language model ("char_lm" graph), when the model reads one, and
the "words" graph.
"""

from __future__ import annotations

import importlib.util
from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from tagger.apply.export_file import read_export_file
from tagger.apply.label_decoding import LabelDecoder, argmax_paths, softmax
from tagger.apply.review import ScoredSentence, score_paths
from tagger.apply.tagger import PREDICT_BATCH, Rows, Tagger
from tagger.errors import ConfigError, ModelFileError
from tagger.network.metadata import read_stored_model
from tagger.text.char_context import pad_readings

CHAR_BLOCK = 4096  # distinct tokens through the characters and vectors graphs at a time


def require_runtime() -> None:
    """ConfigError naming what to install when onnxruntime is missing."""
    if importlib.util.find_spec("onnxruntime") is None:
        raise ConfigError(
            "tagging with --backend onnx needs onnxruntime: pip install 'tagger[onnx]'"
        )


def _decoding(record: Any, labels: int, path: str | Path) -> dict[str, Any]:
    """The export file's CRF table, its shapes checked against the label count."""
    ok = isinstance(record, dict)
    if ok:
        try:
            shapes = {
                name: np.asarray(record[name], dtype=np.float64).shape
                for name in ("start", "end", "transitions", "start_ok", "end_ok", "transitions_ok")
            }
        except (KeyError, ValueError, TypeError):
            ok = False
        else:
            square = (labels, labels)
            ok = all(
                shapes[name] == (square if name.startswith("transitions") else (labels,))
                for name in shapes
            )
    if not ok:
        raise ModelFileError(
            f"{path}: export file is corrupted (its CRF scores do not fit {labels} labels)"
        )
    return record


@dataclass
class ExportedTagger(Tagger):
    """A tagger read from an export file: ``ExportedTagger.load(path).tag(["some text"])``.
    Its ``net`` is None; ``sessions`` holds the onnxruntime session of each graph."""

    sessions: dict[str, Any] = field(default_factory=dict)
    decoding: dict[str, Any] | None = None  # the CRF's scores and flags; None: softmax output
    weights: str = "float32"

    @classmethod
    def load(cls, path: str | Path, threads: int | None = None) -> ExportedTagger:
        """Read and check an export file and open its graphs; ``threads`` (None or 0:
        onnxruntime's default) sets the threads of each graph's run."""
        require_runtime()
        import onnxruntime

        header, graphs = read_export_file(path)
        stored = read_stored_model(header["model"], path)
        vocabs = stored.vocabs
        parts = {
            "characters": stored.config.model.char_encoder != "none",
            "vectors": vocabs.subwords is not None,
            "char_lm": vocabs.char_lm is not None,
            "words": True,
        }
        wanted = {name for name, present in parts.items() if present}
        if set(graphs) != wanted:
            raise ModelFileError(
                f"{path}: export file is corrupted (graphs {sorted(graphs)}; "
                f"expected {sorted(wanted)})"
            )
        decoding = None
        if stored.config.model.output == "crf":
            decoding = _decoding(header.get("decoding"), len(stored.vocabs.labels), path)
        options = onnxruntime.SessionOptions()
        options.intra_op_num_threads = threads or 0
        options.inter_op_num_threads = 1
        options.log_severity_level = 3  # errors only: stderr carries the command's own lines
        sessions = {}
        for name, graph in graphs.items():
            try:
                sessions[name] = onnxruntime.InferenceSession(
                    graph, options, providers=["CPUExecutionProvider"]
                )
            except Exception as error:  # onnxruntime's own error types are not public
                detail = " ".join(str(error).split())[:160]
                raise ModelFileError(
                    f"{path}: export file's graph {name!r} cannot be loaded ({detail})"
                ) from None
        meta = header["model"]
        return cls(
            None,  # type: ignore[arg-type]  # no torch network
            stored.vocabs,
            stored.config,
            stored.input_scheme,
            meta,
            stored.features,
            [],
            sessions,
            decoding,
            header["weights"],
        )

    def save(self, path: str | Path, extra: dict[str, Any] | None = None) -> None:
        raise ModelFileError(
            f"{path}: a model read from an export file cannot be saved as a model file"
        )

    # --- the network, in onnxruntime -----------------------------------------------------------

    def _char_table(self, tokens: list[str]) -> np.ndarray | None:
        """(N+1, F): row 0 (padding) zeros, then each distinct token's character features."""
        session = self.sessions.get("characters")
        if session is None:
            return None
        char_ids = self.vocabs.char_ids
        return self.token_rows["chars"].table(
            tokens, lambda at: _per_token(session, "chars", [char_ids(tokens[i]) for i in at])
        )

    def _vector_table(self, tokens: list[str]) -> np.ndarray | None:
        """(N+1, dim): row 0 (padding) zeros, then each distinct token's vector from the frozen
        table (its word's row, the mean of its n-grams' rows, or zeros)."""
        session = self.sessions.get("vectors")
        if session is None:
            return None
        bag = self.vocabs.subwords.bag
        return self.token_rows["vectors"].table(
            tokens, lambda at: _per_token(session, "bags", [bag(tokens[i]) for i in at])
        )

    def _lm_states(self, token_lists: Sequence[Sequence[str]]) -> np.ndarray | None:
        """(B, T, 2*hidden): the character language model's states at each token's boundaries;
        None for a model that reads none."""
        session = self.sessions.get("char_lm")
        if session is None:
            return None
        ids, lengths, starts, ends = pad_readings(
            [self.vocabs.char_lm.encode(t) for t in token_lists]
        )
        (states,) = session.run(
            None, {"lm_ids": ids, "lm_lengths": lengths, "lm_starts": starts, "lm_ends": ends}
        )
        return states

    def emission_batches(
        self, token_lists: Sequence[Sequence[str]], batch_size: int, rows: Rows | None = None
    ) -> Iterator[tuple[list[int], np.ndarray, np.ndarray]]:
        """(indices into ``token_lists``, emissions (B, T, L), mask (B, T)) per batch of the
        non-empty sentences, sentences of similar length together (indices not in order)."""
        features = self.feature_ids(token_lists, rows)  # before any work: may refuse the input
        distinct: dict[str, int] = {}
        token_rows = [
            [distinct.setdefault(t, len(distinct) + 1) for t in tokens] for tokens in token_lists
        ]
        vocabs = self.vocabs
        word_of = np.asarray([0, *(vocabs.words.index(vocabs.word_key(t)) for t in distinct)])
        tokens = list(distinct)
        char_table = self._char_table(tokens) if distinct else None
        vector_table = self._vector_table(tokens) if distinct else None
        real = sorted(
            (i for i, tokens in enumerate(token_lists) if tokens), key=lambda i: len(token_lists[i])
        )
        words = self.sessions["words"]
        for first in range(0, len(real), batch_size):
            indices = real[first : first + batch_size]
            lengths = [len(token_rows[i]) for i in indices]
            ids = np.zeros((len(indices), max(lengths)), dtype=np.int64)  # (B, T)
            for b, i in enumerate(indices):
                ids[b, : lengths[b]] = token_rows[i]
            inputs = {"words": word_of[ids], "lengths": np.asarray(lengths, dtype=np.int64)}
            if char_table is not None:
                inputs["char_features"] = char_table[ids]  # (B, T, F)
            if self.features is not None:
                slots = np.zeros((*ids.shape, len(features[indices[0]] or [])), dtype=np.int64)
                for b, i in enumerate(indices):
                    slots[b, : lengths[b]] = np.asarray(features[i], dtype=np.int64).T
                inputs["feature_ids"] = slots  # (B, T, K)
            if vector_table is not None:
                inputs["vectors"] = vector_table[ids]  # (B, T, dim)
            lm_states = self._lm_states([token_lists[i] for i in indices])
            if lm_states is not None:
                inputs["lm_states"] = lm_states  # (B, T, 2*hidden)
            (emissions,) = words.run(None, inputs)
            yield indices, emissions, ids != 0

    # --- prediction ----------------------------------------------------------------------------

    def predict_sentences(
        self,
        token_lists: Sequence[Sequence[str]],
        batch_size: int = PREDICT_BATCH,
        with_scores: bool = True,
        rows: Rows | None = None,
        temperature: float | None = None,
    ) -> list[ScoredSentence]:
        """As `Tagger.predict_sentences`, computed by the graphs and numpy."""
        temperature = self.temperature if temperature is None else temperature
        plain = tempered = None
        if self.decoding is not None:
            plain = LabelDecoder.from_record(self.decoding)
            tempered = LabelDecoder.from_record(self.decoding, temperature)
        result = [ScoredSentence([]) for _ in token_lists]
        for indices, emissions, mask in self.emission_batches(token_lists, batch_size, rows):
            paths = plain.decode(emissions, mask) if plain else argmax_paths(emissions, mask)
            probabilities = None
            if with_scores and tempered is not None:
                probabilities = tempered.marginals(emissions / temperature, mask)
            elif with_scores:
                probabilities = softmax(emissions, temperature)
            found = score_paths(paths, probabilities, mask, self.label_ids_to_spans)
            for i, sentence in zip(indices, found, strict=True):
                result[i] = sentence
        return result


def _per_token(session: Any, name: str, ids: list[list[int]]) -> np.ndarray:
    """(N, width): ``session``'s output for each of the N >= 1 tokens' ids (its input
    ``name``), run in blocks of similar length padded with 0."""
    order = sorted(range(len(ids)), key=lambda i: len(ids[i]))
    outputs = []
    for first in range(0, len(order), CHAR_BLOCK):
        chosen = order[first : first + CHAR_BLOCK]
        padded = np.zeros((len(chosen), max(1, len(ids[chosen[-1]]))), dtype=np.int64)
        for row, i in enumerate(chosen):
            padded[row, : len(ids[i])] = ids[i]
        outputs.append(session.run(None, {name: padded})[0])  # (n, width)
    table = np.empty((len(ids), outputs[0].shape[1]), dtype=np.float32)
    table[np.asarray(order)] = np.concatenate(outputs)
    return table
