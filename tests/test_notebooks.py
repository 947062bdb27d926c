"""The analyst and deal-team notebooks run top to bottom, and are stored without outputs.

The kernel is this test's own interpreter (the project's .venv): a kernel spec written to a
temporary JUPYTER_PATH names ``sys.executable``, so no globally installed ``python3`` kernel
can stand in for it.
"""

from __future__ import annotations

import json
import re
import sys
from pathlib import Path

import pytest

nbformat = pytest.importorskip("nbformat", reason="nbformat is in the dev extra")
nbclient = pytest.importorskip("nbclient", reason="nbclient is in the dev extra")

NOTEBOOKS = Path(__file__).resolve().parents[1] / "notebooks"
OURS = ("01-screening.ipynb", "02-target-check.ipynb")
KERNEL = "levgap-test-venv"


@pytest.fixture()
def kernel(tmp_path, monkeypatch) -> str:
    spec = tmp_path / "jupyter" / "kernels" / KERNEL
    spec.mkdir(parents=True)
    (spec / "kernel.json").write_text(json.dumps({
        "argv": [sys.executable, "-m", "ipykernel_launcher", "-f", "{connection_file}"],
        "display_name": "levgap test (.venv)", "language": "python",
        "env": {"PYDEVD_DISABLE_FILE_VALIDATION": "1"},
    }), encoding="utf-8")
    monkeypatch.setenv("JUPYTER_PATH", str(tmp_path / "jupyter"))
    return KERNEL


@pytest.mark.parametrize("name", OURS)
def test_stored_without_outputs(name):
    nb = nbformat.read(NOTEBOOKS / name, as_version=4)
    nbformat.validate(nb)
    code = [c for c in nb.cells if c.cell_type == "code"]
    assert code, name
    assert all(not c.outputs and c.execution_count is None for c in code), name
    assert nb.metadata["kernelspec"]["name"] == "python3"


@pytest.mark.slow
@pytest.mark.parametrize("name", OURS)
def test_runs_top_to_bottom(name, kernel, tmp_path):
    nb = nbformat.read(NOTEBOOKS / name, as_version=4)
    # One extra cell, in memory only: which interpreter ran the notebook.
    nb.cells.append(nbformat.v4.new_code_cell("import sys; print('KERNEL=' + sys.executable)"))
    client = nbclient.NotebookClient(
        nb, kernel_name=kernel, timeout=300, allow_errors=False,
        resources={"metadata": {"path": str(tmp_path)}},
    )
    client.execute()
    outputs = [o for c in nb.cells if c.cell_type == "code" for o in c.outputs]
    assert not [o for o in outputs if o.output_type == "error"]
    text = "\n".join(
        o.get("text", "") if o.output_type == "stream"
        else str(o.get("data", {}).get("text/plain", "")) for o in outputs
    )
    assert f"KERNEL={sys.executable}" in text  # the kernel really was this interpreter
    if name.startswith("01"):
        assert "not in the run: ['TR9999']" in text  # the coverage list, one id absent
        assert "moved outside their band in the latest year" in text
        assert "under their band for three years or more" in text
        assert "= the run's peer median" in text and "no network needed" in text
        assert "persistent: outside the band on the same side" in text or "newly_outside" in text
        source = "\n".join(c.source for c in nb.cells if c.cell_type == "code")
        imports = re.findall(r"^(?:from|import) (\S+)", source, flags=re.M)
        assert [m for m in imports if m.startswith("levgap")] == ["levgap"]  # public API only
    else:
        assert "percentage points" in text and "book leverage" in text
        assert "= target" in text
