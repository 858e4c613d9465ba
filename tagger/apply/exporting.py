"""`tagger export`: a model file's network written as ONNX graphs, with its CRF scores and
metadata beside them, in an export file (`tagger.apply.export_file` describes the layout).

The graphs are traced with torch's TorchScript-based exporter from the network in evaluation
mode, with the batch, time, token and character axes left dynamic. The recurrent layers go in as
torch's fused kernels (ONNX's own RNN, GRU and LSTM operators), which compute what the generic
time loop does; the minimal gated cell has no fused kernel, so its models are refused, as are
models reading a frozen vector table or a character language model (not exported yet).

With ``int8`` the graphs' linear and recurrent weights are quantised to int8 by onnxruntime's
dynamic quantisation (activations are quantised on the fly, per batch); the export file says so.
"""

from __future__ import annotations

import copy
import io
import logging
import tempfile
import warnings
from pathlib import Path
from typing import TYPE_CHECKING, Any

from tagger.apply.export_file import write_export_file
from tagger.errors import ConfigError, ModelFileError

if TYPE_CHECKING:
    import torch

    from tagger.apply.tagger import Tagger

OPSET = 17
EXPORT_PACKAGES = ("onnx", "onnxruntime")


def require_export_packages() -> None:
    """ConfigError naming what to install when onnx or onnxruntime is missing."""
    import importlib.util

    missing = [name for name in EXPORT_PACKAGES if importlib.util.find_spec(name) is None]
    if missing:
        raise ConfigError(
            f"exporting a model needs {' and '.join(missing)}: pip install 'tagger[onnx]'"
        )


def exportable(tagger: Tagger, where: str | Path) -> None:
    """ModelFileError naming what the export cannot carry, before any work."""
    model = tagger.config.model
    if model.cell == "minimal":
        raise ModelFileError(
            f"{where}: a model of minimal gated cells cannot be exported (ONNX has no such "
            "recurrent operator); train with model.cell gru, lstm or rnn"
        )
    if tagger.net.fixed_vectors is not None:
        raise ModelFileError(
            f"{where}: a model reading a frozen pretrained vector table cannot be exported yet"
        )
    if tagger.net.char_lm is not None:
        raise ModelFileError(
            f"{where}: a model reading a character language model cannot be exported yet"
        )


def _fused_copy(tagger: Tagger) -> torch.nn.Module:
    """The network in evaluation mode, every recurrent stack on torch's fused kernel."""
    from tagger.network.encoder import ResidualStack

    net = copy.deepcopy(tagger.net).eval().requires_grad_(False)
    for module in net.modules():
        if isinstance(module, ResidualStack):
            module.fast = True
    return net


def _graph_bytes(
    module: Any,
    args: tuple[Any, ...],
    inputs: list[str],
    output: str,
    axes: dict[str, dict[int, str]],
) -> bytes:
    import torch

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
            dynamic_axes={
                **axes,
                output: {0: "batch", 1: "time"} if output == "emissions" else {0: "tokens"},
            },
            opset_version=OPSET,
            dynamo=False,
        )
    return buffer.getvalue()


def network_graphs(tagger: Tagger) -> dict[str, bytes]:
    """The "characters" graph (models with a character encoder) and the "words" graph."""
    import torch
    from torch import nn

    net = _fused_copy(tagger)
    graphs: dict[str, bytes] = {}
    if net.chars is not None:

        class Characters(nn.Module):
            def __init__(self) -> None:
                super().__init__()
                self.encoder = net.chars

            def forward(self, chars: torch.Tensor) -> torch.Tensor:
                return self.encoder(chars.unsqueeze(1)).squeeze(1)  # (tokens, F)

        sample = torch.tensor([[2, 3, 4], [3, 1, 0]])  # (tokens, chars)
        graphs["characters"] = _graph_bytes(
            Characters(),
            (sample,),
            ["chars"],
            "char_features",
            {"chars": {0: "tokens", 1: "width"}},
        )
    slots = 0 if net.features is None else len(net.features)

    class Words(nn.Module):
        def __init__(self) -> None:
            super().__init__()
            self.net = net

        def forward(
            self, words: torch.Tensor, lengths: torch.Tensor, *rest: torch.Tensor
        ) -> torch.Tensor:
            more = list(rest)
            char_features = more.pop(0) if self.net.chars is not None else None
            features = more.pop(0) if slots else None
            return self.net.emissions(words, None, lengths, char_features, features)

    batch, time = 2, 3
    args: list[torch.Tensor] = [torch.tensor([[2, 3, 1], [4, 0, 0]]), torch.tensor([3, 1])]
    names = ["words", "lengths"]
    axes: dict[str, dict[int, str]] = {"words": {0: "batch", 1: "time"}, "lengths": {0: "batch"}}
    if net.chars is not None:
        args.append(torch.zeros(batch, time, net.chars.output_size))
        names.append("char_features")
        axes["char_features"] = {0: "batch", 1: "time"}
    if slots:
        args.append(torch.ones(batch, time, slots, dtype=torch.long))
        names.append("feature_ids")
        axes["feature_ids"] = {0: "batch", 1: "time"}
    graphs["words"] = _graph_bytes(Words(), tuple(args), names, "emissions", axes)
    return graphs


def quantised(graph: bytes) -> bytes:
    """The graph with its linear and recurrent weights dynamically quantised to int8."""
    from onnxruntime.quantization import QuantType, quantize_dynamic

    with tempfile.TemporaryDirectory() as folder:
        source, target = Path(folder, "in.onnx"), Path(folder, "out.onnx")
        source.write_bytes(graph)
        logging.disable(logging.WARNING)  # its advice on pre-processing goes to the root logger
        try:
            quantize_dynamic(source, target, weight_type=QuantType.QInt8)
        finally:
            logging.disable(logging.NOTSET)
        return target.read_bytes()


def decoding_record(tagger: Tagger) -> dict[str, Any] | None:
    """The CRF's learnt scores and flags as the export file holds them; None without a CRF."""
    crf = tagger.net.crf
    if crf is None:
        return None
    return {
        "start": crf.start.detach().tolist(),
        "end": crf.end.detach().tolist(),
        "transitions": crf.transitions.detach().tolist(),
        "start_ok": crf.start_ok.tolist(),
        "end_ok": crf.end_ok.tolist(),
        "transitions_ok": crf.trans_ok.tolist(),
    }


def export_model(model: str | Path, out: str | Path, int8: bool = False) -> dict[str, int]:
    """Write the export file of the model file ``model`` to ``out``; -> bytes per graph."""
    from tagger.apply.tagger import Tagger

    require_export_packages()
    tagger = Tagger.load(model, threads=1)
    exportable(tagger, model)
    graphs = network_graphs(tagger)
    if int8:
        graphs = {name: quantised(graph) for name, graph in graphs.items()}
    meta = {
        key: value
        for key, value in tagger.meta.items()
        if key not in ("format", "version", "digest")
    }
    header = {
        "model": meta,
        "decoding": decoding_record(tagger),
        "weights": "int8" if int8 else "float32",
    }
    write_export_file(out, header, graphs)
    return {name: len(graph) for name, graph in graphs.items()}
