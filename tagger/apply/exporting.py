"""`tagger export`: a model file's network written as ONNX graphs (`tagger.apply.export_graphs`
makes them), with its CRF scores and metadata beside them, in an export file
(`tagger.apply.export_file` describes the layout).

Every network the tool trains is exported: each cell kind (the minimal gated cell as an ONNX
Loop), each character encoder, the feature slots, a frozen pretrained vector table and a
character language model. The one refusal is a vector table too large for a single ONNX graph.

With ``int8`` the graphs' linear and recurrent weights (and embedding tables, the frozen vector
table included) are quantised to int8 by onnxruntime's dynamic quantisation (activations are
quantised on the fly, per batch); the export file says so.
"""

from __future__ import annotations

import logging
import tempfile
from pathlib import Path
from typing import TYPE_CHECKING, Any

from tagger.apply.export_file import write_export_file
from tagger.errors import ConfigError, ModelFileError

if TYPE_CHECKING:
    from tagger.apply.tagger import Tagger

EXPORT_PACKAGES = ("onnx", "onnxruntime")
# A graph is one protobuf message, which cannot exceed 2 GiB; keep room for everything else.
MAX_TABLE_BYTES = 2**31 - 64 * 2**20


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
    fixed = tagger.net.fixed_vectors
    if fixed is not None:
        size = fixed.table.numel() * fixed.table.element_size()
        if size > MAX_TABLE_BYTES:
            raise ModelFileError(
                f"{where}: its frozen vector table ({size / 2**30:.1f} GiB) is larger than one "
                f"ONNX graph can hold ({MAX_TABLE_BYTES / 2**30:.1f} GiB); train it with a "
                "smaller model.vector_words or vectors learnt with fewer n-gram buckets"
            )


def quantised(graph: bytes) -> bytes:
    """The graph with its linear and recurrent weights dynamically quantised to 8 bits.

    Unsigned weights: beside signed ones, tagging ran 8% faster on this project's 2-core
    machines (AMD EPYC, onnxruntime's x86 kernels), 1.83x torch rather than 1.69x on the demo,
    with span F1 within 0.12 points of the float model (benchmarks/onnx.md)."""
    from onnxruntime.quantization import QuantType, quantize_dynamic

    with tempfile.TemporaryDirectory() as folder:
        source, target = Path(folder, "in.onnx"), Path(folder, "out.onnx")
        source.write_bytes(graph)
        logging.disable(logging.WARNING)  # its advice on pre-processing goes to the root logger
        try:
            quantize_dynamic(source, target, weight_type=QuantType.QUInt8)
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
    from tagger.apply.export_graphs import network_graphs
    from tagger.apply.tagger import Tagger

    require_export_packages()
    tagger = Tagger.load(model, threads=1)
    exportable(tagger, model)
    graphs = network_graphs(tagger.net)
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
