"""docs/model-files.md: its h5py example writes a file that kinemap opens.

The test runs exactly the block of the document (so the two cannot drift apart) in a fresh
folder and compares what kinemap reads with the arrays the block made.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np

import kinemap as km

DOC = Path(__file__).resolve().parents[1] / "docs" / "model-files.md"


def example(name: str) -> str:
    text = DOC.read_text(encoding="utf-8")
    m = re.search(rf"<!-- example: {re.escape(name)} -->\s*```python\n(.*?)```", text, re.S)
    assert m, f"no example {name!r} in {DOC.name}"
    return m.group(1)


def test_h5py_example_writes_a_valid_h5md_file(tmp_path, monkeypatch):
    code = example("write-h5md")
    assert len([ln for ln in code.splitlines() if ln.strip()]) <= 13  # a short example
    monkeypatch.chdir(tmp_path)
    namespace: dict = {}
    exec(compile(code, str(DOC), "exec"), namespace)
    src = km.open_model(tmp_path / "model.h5md")
    assert src.format == "h5md" and src.n_atoms == 1000 and src.n_frames == 1
    np.testing.assert_array_equal(src.read().positions, namespace["xyz"])
    np.testing.assert_array_equal(src.box, np.diag([20.0, 20.0, 20.0]))
    assert src.species_labels() == ["Fe", "Ni"]
    d = src.describe()
    assert d["boundary"] == ["periodic"] * 3 and d["position_unit"] == "Angstrom" and "missing" not in d
