"""Checks of the onnx backend shared by the export tests: tagging in a fresh Python where
`import torch` fails (what the backend promises to a machine without torch), and its records set
beside torch's."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

# A None entry in sys.modules makes `import torch` raise ImportError.
_PROGRAM = """\
import json, sys
sys.modules['torch'] = None
from tagger.apply.exported import ExportedTagger
tagger = ExportedTagger.load({exported!r}, threads=1)
found = tagger.tag({texts!r})
print(json.dumps([[m.to_record() for m in f] for f in found]))
print(json.dumps('torch' in sys.modules and sys.modules['torch'] is not None))
"""


def tag_without_torch(exported: Path, texts: list[str]) -> tuple[list[list[dict]], bool]:
    """The mention records of each text, and whether torch got loaded after all."""
    code = _PROGRAM.format(exported=str(exported), texts=texts)
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    records, torch_loaded = done.stdout.strip().splitlines()
    return json.loads(records), json.loads(torch_loaded)


def assert_same_records(torch_records: list[dict], onnx_records: list[dict]) -> None:
    """The onnx backend's JSON Lines records against torch's: the same spans and review flags,
    confidences within 1e-4 (both are rounded to 4 places)."""
    for a, b in zip(torch_records, onnx_records, strict=True):
        assert [(m["type"], m["at"]) for m in a["mentions"]] == [
            (m["type"], m["at"]) for m in b["mentions"]
        ]
        for x, y in zip(a["mentions"], b["mentions"], strict=True):
            assert abs(x["confidence"] - y["confidence"]) <= 1e-4 + 1e-9
        assert a["needs_review"] == b["needs_review"]


def assert_same_scored(expected: list, got: list) -> None:
    """Scored sentences of the two backends: the same spans, span scores and certainties within
    1e-4."""
    assert len(expected) == len(got)
    for a, b in zip(expected, got, strict=True):
        assert [s[:3] for s in a.spans] == [s[:3] for s in b.spans]
        for x, y in zip(a.spans, b.spans, strict=True):
            assert abs(x[3] - y[3]) < 1e-4
        assert abs(a.certainty - b.certainty) < 1e-4
