"""Reading the files learnt from unannotated text: the model file's container (verified, never
unpickled; `tagger.network.modelfile`), its refusals said as DataErrors about the kind of file
the user gave."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import torch

from tagger.errors import DataError, ModelFileError
from tagger.network.modelfile import load_model_file


def read_container(path: str | Path, what: str) -> tuple[dict[str, torch.Tensor], dict[str, Any]]:
    """The tensors and metadata of `path`; `what` names the file in a refusal ("word vectors
    file"), which is one DataError naming the file."""
    name = str(path)
    try:
        return load_model_file(path)
    except ModelFileError as error:
        detail = str(error).removeprefix(f"{name}: ").replace("model file", "file")
        raise DataError(f"not a readable {what}: {detail}", name) from None
