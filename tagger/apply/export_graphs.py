"""A model's network as ONNX graphs, one per part that tagging runs at its own rate, traced by
torch's TorchScript-based exporter from the network in evaluation mode:

    graph        inputs                                      output                 run
    characters   chars (tokens, width)                       char_features (tokens, F)  per distinct token
    vectors      bags (tokens, rows)                         vectors (tokens, dim)      per distinct token
    char_lm      lm_ids (B, chars), lm_lengths (B,),         lm_states (B, T, 2*hidden) per batch
                 lm_starts (B, T), lm_ends (B, T)
    words        words (B, T), lengths (B,), and those of    emissions (B, T, L)        per batch
                 char_features (B, T, F), feature_ids (B, T, K),
                 vectors (B, T, dim), lm_states (B, T, 2*hidden) the model reads

Every batch, time, token, character and row axis is left dynamic. A graph exists only for a part
the model has ("characters": a character encoder; "vectors": a frozen vector table; "char_lm": a
character language model).

Recurrent layers go in as torch's fused kernels (ONNX's own RNN, GRU and LSTM operators), which
compute what the generic time loop does. The minimal gated cell has neither a fused kernel nor
an ONNX operator: its time loop goes in as a scripted loop (`minimal_steps`), which the exporter
writes as an ONNX Loop of one matrix product and the gate arithmetic per step, so no sentence
length is baked into the graph.

The frozen vector table is a graph of its own, the table an initializer and each token's rows
(`SubwordIndex.bag`: its word's row, or its n-grams' bucket rows) an input computed beside the
graph in Python, as word ids are. Looking the rows up in numpy instead would need the table kept
beside the graphs in a storage format of our own; as a graph it is ONNX's packed float32, the
same size as in the model file, shrunk to int8 by the same quantiser as the other weights with
``--int8``, and the tagging side needs neither torch nor a second reader. It runs once per
distinct token, its rows remembered between calls, as torch's prediction does
(`tagger.apply.predict`).
"""

from __future__ import annotations

import copy
import functools
import io
import warnings
from typing import Any

import torch
from torch import Tensor, nn

from tagger.network.cells import MinimalCell
from tagger.network.encoder import ResidualStack
from tagger.network.net import TaggerNet

OPSET = 17


def minimal_steps(xg: Tensor, weight: Tensor) -> Tensor:
    """The minimal gated cell's time loop (`MinimalCell.step` over every step) from a zero
    state: xg (time, batch, 2*hidden) projected inputs, weight (hidden, 2*hidden) the transposed
    recurrent weights -> (batch, time, hidden). Written for TorchScript; time must be >= 1."""
    hidden = weight.shape[0]
    h = torch.zeros(xg.shape[1], hidden, dtype=xg.dtype)
    outputs: list[Tensor] = []
    for t in range(xg.shape[0]):
        gates = torch.addmm(xg[t], h, weight)  # (batch, 2*hidden): blocks g, c
        c = torch.tanh(gates[:, hidden:])
        # lerp(c, h, g) = c + g * (h - c); ONNX has no lerp operator
        h = c + torch.sigmoid(gates[:, :hidden]) * (h - c)
        outputs.append(h)
    return torch.stack(outputs, 1)


@functools.cache
def _scripted_minimal_steps() -> Any:
    return torch.jit.script(minimal_steps)


class LoopedMinimalCell(MinimalCell):
    """A minimal gated cell whose "fused" run is the scripted loop: the export copy's cells are
    switched to it, so the stacks take their fused path and the tracer records one Loop."""

    has_fused = True

    def fused(self, x: Tensor) -> Tensor:
        xg = self.project(x.transpose(0, 1))  # (time, batch, 2*hidden)
        return _scripted_minimal_steps()(xg, self.weight_hh.t())  # (batch, time, hidden)


def export_copy(net: TaggerNet) -> TaggerNet:
    """The network in evaluation mode without gradients, every recurrent stack (the character
    encoder's and the language model's included) on its fused path."""
    net = copy.deepcopy(net).eval().requires_grad_(False)
    for module in net.modules():
        if isinstance(module, ResidualStack):
            for cell in module.cells:
                if isinstance(cell, MinimalCell):
                    # the copy's own cells: same parameters, only the time loop differs
                    cell.__class__ = LoopedMinimalCell
            module.fast = True
    return net


def graph_bytes(
    module: nn.Module,
    args: tuple[Tensor, ...],
    inputs: list[str],
    output: str,
    axes: dict[str, dict[int, str]],
) -> bytes:
    """``module`` traced on ``args`` as ONNX bytes; ``axes`` names the dynamic axes of the
    inputs and the output."""
    buffer = io.BytesIO()
    # The tracer warns of every Python-level check it bakes in (shapes, lengths); those checks
    # hold for any input the backend builds, so the warnings say nothing to the user.
    with torch.no_grad(), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        torch.onnx.export(
            module,
            args,
            buffer,
            input_names=inputs,
            output_names=[output],
            dynamic_axes=axes,
            opset_version=OPSET,
            dynamo=False,
        )
    return buffer.getvalue()


class _Characters(nn.Module):
    def __init__(self, encoder: nn.Module) -> None:
        super().__init__()
        self.encoder = encoder

    def forward(self, chars: Tensor) -> Tensor:
        return self.encoder(chars.unsqueeze(1)).squeeze(1)  # (tokens, F)


class _BagMeans(nn.Module):
    """Each token's vector: the mean of its bag's rows of the table, zeros for an empty bag (as
    `FixedVectors` computes it with torch's embedding_bag, which ONNX has no operator for)."""

    def __init__(self, table: Tensor) -> None:
        super().__init__()
        self.register_buffer("table", table)

    def forward(self, bags: Tensor) -> Tensor:
        real = (bags != 0).unsqueeze(2).to(self.table.dtype)  # (tokens, rows, 1)
        summed = (self.table[bags] * real).sum(1)  # (tokens, dim)
        return summed / real.sum(1).clamp_min(1.0)


class _LMStates(nn.Module):
    def __init__(self, lm: nn.Module) -> None:
        super().__init__()
        self.lm = lm

    def forward(self, ids: Tensor, lengths: Tensor, starts: Tensor, ends: Tensor) -> Tensor:
        return self.lm(ids, lengths, starts, ends)  # (B, T, 2*hidden)


class _Words(nn.Module):
    def __init__(self, net: TaggerNet) -> None:
        super().__init__()
        self.net = net

    def forward(self, words: Tensor, lengths: Tensor, *rest: Tensor) -> Tensor:
        net, more = self.net, list(rest)
        char_features = more.pop(0) if net.chars is not None else None
        features = more.pop(0) if net.features is not None else None
        vectors = more.pop(0) if net.fixed_vectors is not None else None
        lm_states = more.pop(0) if net.char_lm is not None else None
        return net.emissions(words, None, lengths, char_features, features, vectors, lm_states)


def network_graphs(net: TaggerNet) -> dict[str, bytes]:
    """The graphs of the module docstring that ``net`` has, "words" last."""
    net = export_copy(net)
    graphs: dict[str, bytes] = {}
    if net.chars is not None:
        sample = torch.tensor([[2, 3, 4], [3, 1, 0]])  # (tokens, chars)
        graphs["characters"] = graph_bytes(
            _Characters(net.chars),
            (sample,),
            ["chars"],
            "char_features",
            {"chars": {0: "tokens", 1: "width"}, "char_features": {0: "tokens"}},
        )
    if net.fixed_vectors is not None:
        table = net.fixed_vectors.table
        bags = torch.tensor([[1, 0, 0], [2, 3, 1]]) % table.shape[0]  # (tokens, rows)
        graphs["vectors"] = graph_bytes(
            _BagMeans(table),
            (bags,),
            ["bags"],
            "vectors",
            {"bags": {0: "tokens", 1: "rows"}, "vectors": {0: "tokens"}},
        )
    if net.char_lm is not None:
        # two sentences of 2 and 1 tokens: | x x _ x | and | x |, ids of the boundary and the
        # unknown character only, which every language model has
        ids = torch.tensor([[1, 2, 2, 2, 2, 1], [1, 2, 1, 0, 0, 0]])
        starts, ends = torch.tensor([[1, 4], [1, 0]]), torch.tensor([[2, 4], [1, 0]])
        graphs["char_lm"] = graph_bytes(
            _LMStates(net.char_lm),
            (ids, torch.tensor([6, 3]), starts, ends),
            ["lm_ids", "lm_lengths", "lm_starts", "lm_ends"],
            "lm_states",
            {
                "lm_ids": {0: "batch", 1: "chars"},
                "lm_lengths": {0: "batch"},
                "lm_starts": {0: "batch", 1: "time"},
                "lm_ends": {0: "batch", 1: "time"},
                "lm_states": {0: "batch", 1: "time"},
            },
        )
    batch, time = 2, 3
    # in the order `TaggerNet.emissions` takes them
    inputs = {"words": torch.tensor([[2, 3, 1], [4, 0, 0]]), "lengths": torch.tensor([3, 1])}
    if net.chars is not None:
        inputs["char_features"] = torch.zeros(batch, time, net.chars.output_size)
    if net.features is not None:
        inputs["feature_ids"] = torch.ones(batch, time, len(net.features), dtype=torch.long)
    if net.fixed_vectors is not None:
        inputs["vectors"] = torch.zeros(batch, time, net.fixed_vectors.output_size)
    if net.char_lm is not None:
        inputs["lm_states"] = torch.zeros(batch, time, net.char_lm.output_size)
    axes = {name: {0: "batch", 1: "time"} for name in [*inputs, "emissions"]}
    axes["lengths"] = {0: "batch"}
    graphs["words"] = graph_bytes(
        _Words(net), tuple(inputs.values()), list(inputs), "emissions", axes
    )
    return graphs
