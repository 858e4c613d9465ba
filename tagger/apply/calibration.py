"""Calibrating a model's scores: the temperature that makes its label probabilities honest on dev.

A network trained to fit its training data is sure of itself beyond what it gets right on new
text, so its span scores and certainties (`tagger.apply.review`) come out too high. Dividing every
score of the model by a temperature above 1 spreads its probabilities without changing a single
decoded label (`tagger.apply.predict.label_probabilities`).

The temperature is the one under which the dev tokens' gold labels (in the model's scheme) get
the highest mean log-probability from the marginals: the same probabilities span scores and the
review flag are read from. It is searched over [1/4, 8] on a logarithmic grid and refined by
golden-section search next to the grid's best point, so the result depends on the data only.
Tokens whose gold label the model does not know (a type training never saw) are left out.

Training fits it when a run ends and stores it in the model file's metadata ("calibration").
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

import torch

from tagger.apply.predict import emission_batches, label_probabilities, tempered_crf
from tagger.apply.tagger import PREDICT_BATCH, Rows, Tagger
from tagger.data.schemes import Span, spans_to_tags

if TYPE_CHECKING:
    from tagger.data.corpus import Sentence

LOWEST, HIGHEST = 0.25, 8.0  # the temperatures searched
GRID_POINTS = 16  # log-spaced: neighbours about 1.26x apart
TOLERANCE = 0.005  # of the golden-section search, in log-temperature (0.5%)
_GOLDEN = (math.sqrt(5) - 1) / 2


@dataclass(frozen=True)
class Calibration:
    """A fitted temperature, the tokens it was fitted on, and the mean negative log-probability
    of their gold labels before (temperature 1) and after."""

    temperature: float
    tokens: int
    loss_before: float
    loss_after: float

    def to_dict(self) -> dict[str, Any]:
        return {key: round(value, 6) for key, value in asdict(self).items()}


def gold_label_loss(
    tagger: Tagger,
    token_lists: Sequence[Sequence[str]],
    gold_spans: Sequence[Sequence[Span]],
    rows: Rows | None = None,
    batch_size: int = PREDICT_BATCH,
) -> tuple[Callable[[float], float], int]:
    """A function of the temperature giving the mean negative log-probability of the gold labels,
    and how many tokens it averages over. The network runs once, here; each call redoes only
    the marginals."""
    stoi = tagger.vocabs.labels.stoi
    batches: list[tuple[torch.Tensor, torch.Tensor, torch.Tensor]] = []
    tokens = 0
    for indices, emissions, mask in emission_batches(tagger, token_lists, batch_size, rows):
        gold = torch.full(tuple(mask.shape), -1, dtype=torch.long)  # -1: padding or unknown
        for b, i in enumerate(indices):
            tags = spans_to_tags(list(gold_spans[i]), len(token_lists[i]), tagger.scheme)
            gold[b, : len(tags)] = torch.tensor([stoi.get(tag, -1) for tag in tags])
        tokens += int((gold >= 0).sum())
        batches.append((emissions, mask, gold))
    net = tagger.net

    def loss(temperature: float) -> float:
        total = 0.0
        with torch.no_grad():
            crf = None if net.crf is None else tempered_crf(net.crf, temperature)
            for emissions, mask, gold in batches:
                if crf is not None:
                    probabilities = crf.marginals(emissions / temperature, mask)
                else:
                    probabilities = label_probabilities(net, emissions, mask, temperature)
                known = gold >= 0
                picked = probabilities.gather(2, gold.clamp_min(0).unsqueeze(2)).squeeze(2)
                total -= float(picked[known].clamp_min(1e-30).log().sum())
        return total / tokens if tokens else 0.0

    return loss, tokens


def fit_temperature(
    tagger: Tagger,
    token_lists: Sequence[Sequence[str]],
    gold_spans: Sequence[Sequence[Span]],
    rows: Rows | None = None,
) -> Calibration | None:
    """The temperature that best fits the gold labels of these sentences (None without tokens)."""
    loss, tokens = gold_label_loss(tagger, token_lists, gold_spans, rows)
    if tokens == 0:
        return None
    best = minimise_log_scale(loss, LOWEST, HIGHEST)
    return Calibration(best, tokens, loss(1.0), loss(best))


def minimise_log_scale(function: Callable[[float], float], low: float, high: float) -> float:
    """Where in [low, high] `function` is smallest: the best of a log-spaced grid, then a
    golden-section search between that point's neighbours (ties go to the lower point)."""
    step = (math.log(high) - math.log(low)) / (GRID_POINTS - 1)
    grid = [math.log(low) + k * step for k in range(GRID_POINTS)]
    values = [function(math.exp(x)) for x in grid]
    k = values.index(min(values))
    a, b = grid[max(k - 1, 0)], grid[min(k + 1, GRID_POINTS - 1)]
    c, d = b - _GOLDEN * (b - a), a + _GOLDEN * (b - a)
    fc, fd = function(math.exp(c)), function(math.exp(d))
    while b - a > TOLERANCE:
        if fc <= fd:
            b, d, fd = d, c, fc
            c = b - _GOLDEN * (b - a)
            fc = function(math.exp(c))
        else:
            a, c, fc = c, d, fd
            d = a + _GOLDEN * (b - a)
            fd = function(math.exp(d))
    candidates = [(values[k], grid[k]), (fc, c), (fd, d)]
    return math.exp(min(candidates)[1])


def calibrate_model_file(
    path: str | Path, sentences: Sequence[Sentence], gold_spans: Sequence[Sequence[Span]]
) -> Calibration | None:
    """Fit the model file's temperature on these sentences and store it in the file (None, and
    the file left alone, when they hold no token to fit on)."""
    tagger = Tagger.load(path)
    rows = [s.rows for s in sentences] if tagger.needs_columns else None
    fitted = fit_temperature(tagger, [s.tokens for s in sentences], gold_spans, rows)
    if fitted is not None:
        tagger.save(path, {"calibration": fitted.to_dict()})
    return fitted
