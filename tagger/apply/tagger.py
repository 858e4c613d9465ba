"""`Tagger`: a trained model in memory (network, vocabularies, config, features), saved to and
loaded from one model file, predicting on token lists and tagging raw texts.

Importing this module needs no torch: torch comes in when a model is loaded, saved or predicts
(`tagger.apply.predict` does the work), so ``from tagger import Tagger`` stays light.
"""

from __future__ import annotations

import os
import platform
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from functools import cached_property
from pathlib import Path
from typing import TYPE_CHECKING, Any

from tagger.apply.documents import Document, Skipped
from tagger.apply.engine import CHUNK_CHARS, Engine, Mention, chunks
from tagger.apply.review import ScoredSentence, ScoredSpan
from tagger.apply.token_rows import TokenRows
from tagger.config import Config
from tagger.data.corpus import ColumnFormat
from tagger.data.schemes import Span, read_spans, spans_to_tags, split_tag
from tagger.errors import DataError, ModelFileError, TaggerError
from tagger.text.features import FeatureSpec
from tagger.text.sentences import split_sentences
from tagger.text.tokenizer import TextSentence, TokenizerSettings
from tagger.text.vocab import Vocabularies
from tagger.version import __version__

if TYPE_CHECKING:
    import torch

    from tagger.apply.predict import TokenIds
    from tagger.network.batching import EncodedSentence
    from tagger.network.metadata import StoredModel
    from tagger.network.net import TaggerNet

# The metadata key training stores the column layout of its files under (see `column_layout`).
COLUMN_LAYOUT_KEY = "column_layout"
PREDICT_BATCH = 64  # sentences per batch when predicting (PERFORMANCE.md: 64-128 on 2 threads)

Rows = Sequence[Sequence[Sequence[str]]]  # per sentence, per token: every column of its line


def limit_kernel_cache() -> None:
    """Cap oneDNN's cache of compiled kernels; called where tagging starts (loading a model).

    oneDNN keeps a compiled recurrent kernel for every (batch, length) shape it meets, up to 1,024
    of them by default; a long input with varied sentence lengths fills that cache and peak memory
    grows with the input (measured: +100 MB from a 10 MB to a 100 MB input). 64 keeps memory flat
    at no measurable cost in speed. It must be set before the first kernel is built, i.e. before
    tagging; a value already in the environment wins.
    """
    os.environ.setdefault("ONEDNN_PRIMITIVE_CACHE_CAPACITY", "64")


def read_tokenizer_settings(meta: dict[str, Any]) -> TokenizerSettings:
    """The tokenizer settings stored in a model's metadata (defaults for models without any)."""
    return TokenizerSettings.from_dict(meta.get("tokenizer", {}))


def _read_checked(
    path: str | Path, notes: list[str]
) -> tuple[dict[str, torch.Tensor], dict[str, Any], StoredModel]:
    """A model file's tensors, raw metadata and checked contents; nothing built yet."""
    from tagger.network.metadata import check_weights, read_stored_model
    from tagger.network.modelfile import load_model_file

    tensors, meta = load_model_file(path, notes)
    stored = read_stored_model(meta, path)
    check_weights(tensors, stored, path)
    return tensors, meta, stored


def model_tokenizer_settings(path: str | Path, notes: list[str] | None = None) -> TokenizerSettings:
    """The tokenizer settings of a model file, read with every check `Tagger.load` makes (no
    network is built); notes on the file are appended to ``notes``."""
    return _read_checked(path, notes if notes is not None else [])[2].tokenizer


@dataclass
class Tagger:
    """A trained tagger: ``Tagger.load(path).tag(["some text"])``.

    Training builds one from its network, vocabularies, config, the scheme of the training files
    and the features; `load` rebuilds one from a model file.
    """

    net: TaggerNet
    vocabs: Vocabularies
    config: Config
    input_scheme: str  # the scheme of the training files; predictions are written back in it
    meta: dict[str, Any] = field(default_factory=dict)
    features: FeatureSpec | None = None  # extra columns, lexicons, word shape; None: words only
    notes: list[str] = field(default_factory=list)  # remarks on the model file it was loaded from

    # --- model files ---------------------------------------------------------------------------

    @classmethod
    def load(cls, path: str | Path, threads: int | None = None) -> Tagger:
        """Rebuild a tagger from its model file (never unpickles).

        Nothing is built before the metadata is checked and the file's tensors are found to be
        exactly those of the network it describes (`tagger.network.metadata`); every refusal is
        a one-line ModelFileError naming the file. Notes on the file (one written before the
        metadata digest) are kept in ``notes``.
        ``threads`` sets how many threads torch uses in this process (None or 0: torch's default).
        """
        limit_kernel_cache()  # before torch builds any kernel
        import torch

        from tagger.network.net import build_net

        if threads:
            torch.set_num_threads(threads)
        notes: list[str] = []
        tensors, meta, stored = _read_checked(path, notes)
        try:
            net = build_net(stored.config, stored.vocabs, stored.features)
            net.load_state_dict(tensors)
        except (RuntimeError, ValueError) as error:  # not expected once the checks have passed
            detail = " ".join(str(error).split())[:200]
            raise ModelFileError(
                f"{path}: weights do not fit the stored config ({detail})"
            ) from None
        net.eval()
        return cls(
            net, stored.vocabs, stored.config, stored.input_scheme, meta, stored.features, notes
        )

    def save(self, path: str | Path, extra: dict[str, Any] | None = None) -> None:
        """Write the model file; ``extra`` adds to (or replaces) keys of the stored metadata."""
        import torch

        from tagger.network.modelfile import save_model_file

        meta = {
            **self.meta,
            **(extra or {}),
            "config": self.config.to_dict(),
            "vocabularies": self.vocabs.to_dict(),
            "input_scheme": self.input_scheme,
            **({"features": self.features.to_dict()} if self.features is not None else {}),
            "versions": {
                "tagger": __version__,
                "torch": torch.__version__,
                "python": platform.python_version(),
            },
        }
        save_model_file(path, self.net.state_dict(), meta)

    # --- what the model is ---------------------------------------------------------------------

    @property
    def scheme(self) -> str:
        """The scheme the network predicts in."""
        return self.config.model.scheme

    @property
    def needs_columns(self) -> bool:
        """Does the model read extra input columns (so that it can tag column files only)?"""
        return self.features is not None and self.features.needs_columns

    @property
    def column_layout(self) -> ColumnFormat | None:
        """How the training files' columns were read (token column, label column, delimiter),
        for reading gold files of the same layout; None for a model trained on sentences in
        memory, or saved before models kept their layout. The encoding is not kept: a file in
        another encoding than the one named would read as wrong text, not fail."""
        stored = self.meta.get(COLUMN_LAYOUT_KEY)
        if stored is None:
            return None
        try:
            delimiter = stored["delimiter"]
            return ColumnFormat(
                delimiter=None if delimiter == "auto" else delimiter,
                token_column=stored["token_column"],
                label_column=stored["label_column"],
            )
        except (KeyError, TypeError, TaggerError) as error:
            raise ModelFileError(
                f"the model's stored column layout is unreadable ({error})"
            ) from None

    @property
    def tokenizer_settings(self) -> TokenizerSettings:
        """The tokenizer settings the model was trained with."""
        return read_tokenizer_settings(self.meta)

    @property
    def temperature(self) -> float:
        """What the model's scores are divided by before its probabilities are read: fitted on
        dev when training ends (`tagger.apply.calibration`); 1.0 for models without one."""
        return float(self.meta.get("calibration", {}).get("temperature", 1.0))

    def tokenize(self, text: str) -> list[TextSentence]:
        """The sentences and tokens the tagger sees in `text`."""
        return split_sentences(text, self.tokenizer_settings)

    # --- prediction on token lists -------------------------------------------------------------

    def feature_ids(
        self, token_lists: Sequence[Sequence[str]], rows: Rows | None = None
    ) -> list[list[list[int]] | None]:
        """Per sentence, its feature ids (slot-major), or None for a model without features.

        ``rows`` (per sentence, the column-file lines of its tokens) are needed by models that
        read extra columns; without them such a model raises FeatureInputError.
        """
        spec = self.features
        if spec is None:
            return [None] * len(token_lists)
        if rows is not None and len(rows) != len(token_lists):
            raise ValueError(
                f"got rows for {len(rows)} sentences and {len(token_lists)} token lists"
            )
        return [
            spec.encode(tokens, None if rows is None else rows[i])
            for i, tokens in enumerate(token_lists)
        ]

    def encode(
        self, token_lists: Sequence[Sequence[str]], rows: Rows | None = None
    ) -> list[EncodedSentence]:
        """Word, character and feature ids of each sentence, as training reads them."""
        from tagger.network.batching import encode_sentence

        features = self.feature_ids(token_lists, rows)
        return [
            encode_sentence(tokens, self.vocabs, features=f)
            for tokens, f in zip(token_lists, features, strict=True)
        ]

    def encode_cached(self, token_lists: Sequence[Sequence[str]]) -> list[EncodedSentence]:
        """Like :meth:`encode` without features, remembering each distinct token's ids."""
        from tagger.apply.predict import encode_cached

        return encode_cached(self.vocabs, self._token_ids, token_lists)

    @cached_property
    def _token_ids(self) -> dict[str, TokenIds]:
        return {}

    @cached_property
    def token_rows(self) -> dict[str, TokenRows]:
        """Per-token rows remembered between calls: "chars" (character features) and
        "vectors" (frozen pretrained vectors)."""
        return {"chars": TokenRows(), "vectors": TokenRows()}

    @cached_property
    def _label_parts(self) -> list[tuple[str, str]]:
        """(prefix, type) of each label id, split once."""
        return [split_tag(label) for label in self.vocabs.labels.itos]

    def label_ids_to_spans(self, ids: Sequence[int]) -> list[Span]:
        """The spans of a sequence of label ids: ``tags_to_spans`` of their labels."""
        parts = self._label_parts
        return read_spans([parts[j] for j in ids])

    def predict_sentences(
        self,
        token_lists: Sequence[Sequence[str]],
        batch_size: int = PREDICT_BATCH,
        with_scores: bool = True,
        rows: Rows | None = None,
        temperature: float | None = None,
    ) -> list[ScoredSentence]:
        """Per sentence, its spans with a confidence score in [0, 1] each, and its certainty.

        A span's score is the smallest, over its tokens, of the probability the model gives the
        label the decoder chose at that token: the CRF's marginal P(label at t | sentence), or the
        softmax probability without a CRF, at the model's fitted ``temperature`` (None) or the
        one given. A span scores high only if every one of its tokens is sure, so one doubtful
        boundary or type is enough to flag it. A sentence's certainty is the same smallest
        probability over all of its tokens, those outside spans included (see
        `tagger.apply.review`). Without ``with_scores`` every score and certainty is 1.0. Empty
        sentences get no spans. ``rows`` gives the column-file lines of models that read columns.
        """
        from tagger.apply.predict import scored_sentences

        return scored_sentences(self, token_lists, batch_size, with_scores, rows, temperature)

    def predict_scored_spans(
        self,
        token_lists: Sequence[Sequence[str]],
        batch_size: int = PREDICT_BATCH,
        with_scores: bool = True,
        rows: Rows | None = None,
    ) -> list[list[ScoredSpan]]:
        """Spans per sentence, each with its confidence score (see :meth:`predict_sentences`)."""
        sentences = self.predict_sentences(token_lists, batch_size, with_scores, rows)
        return [sentence.spans for sentence in sentences]

    def predict_spans(
        self,
        token_lists: Sequence[Sequence[str]],
        batch_size: int = PREDICT_BATCH,
        rows: Rows | None = None,
    ) -> list[list[Span]]:
        """Spans (type, start, end) per sentence; empty sentences get no spans."""
        scored = self.predict_scored_spans(token_lists, batch_size, with_scores=False, rows=rows)
        return [[span[:3] for span in spans] for spans in scored]

    def predict_labels(
        self,
        token_lists: Sequence[Sequence[str]],
        scheme: str | None = None,
        rows: Rows | None = None,
    ) -> list[list[str]]:
        """Labels per token, in ``scheme`` (default: the scheme of the training files)."""
        target = scheme or self.input_scheme
        spans = self.predict_spans(token_lists, rows=rows)
        return [spans_to_tags(s, len(t), target) for s, t in zip(spans, token_lists, strict=True)]

    # --- raw texts -----------------------------------------------------------------------------

    def tag(self, texts: Iterable[str], min_score: float = 0.0) -> list[list[Mention]]:
        """Mentions per text, in order, as the `tag` command finds them (in chunks, like it):
        each a `Mention(type, start, end, quote, confidence)`, offsets in code points of the text,
        end exclusive; those with confidence below `min_score` are left out.

        Raises TypeError for a single string (use :meth:`tag_text`), DataError for a text holding
        a sentence longer than max_sentence_tokens, and FeatureInputError for a model that reads
        extra input columns (raw text has none).
        """
        if isinstance(texts, str | bytes):
            raise TypeError(
                "Tagger.tag takes a list of texts, not one string; "
                "pass [text] or call tag_text(text)"
            )
        if self.features is not None and self.features.needs_columns:
            raise self.features.refusal("raw text")
        engine = Engine(self, self.tokenizer_settings, PREDICT_BATCH)
        docs = (Document(i, text, f"text {i}", 1) for i, text in enumerate(texts))
        found: list[list[Mention]] = []
        for chunk in chunks(docs, CHUNK_CHARS, stop_at_skip=False):
            for entry in engine.tag(chunk):
                if isinstance(entry, Skipped):
                    raise DataError(entry.message, entry.source)
                found.append([m for m in entry.mentions if m.confidence >= min_score])
        return found

    def tag_text(self, text: str, min_score: float = 0.0) -> list[Mention]:
        """The mentions of one text (see :meth:`tag`)."""
        (mentions,) = self.tag([text], min_score)
        return mentions
