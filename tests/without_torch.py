"""Tagging with an exported model in a fresh Python where `import torch` fails: what the onnx
backend promises to a machine without torch."""

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
