"""The worked-example notebooks run from start to finish and show what they promise.

Each notebook is copied to a temporary folder and executed there with nbclient (kernel
``python3``), so nothing is written into the repository; figures that a notebook saves go to
``WALKERS_FIGURE_DIR`` and their scratch files to ``TMPDIR``, both pointed at the same
temporary folder. The checks: no cell raises, every
cell that shows a figure produced a PNG, the first cell states what the notebook shows and carries
the caution, and the files in the repository are stored without outputs (commit-ready).
"""

from __future__ import annotations

import shutil
from pathlib import Path

import nbformat
import pytest
from nbclient import NotebookClient

import walkers

REPO = Path(__file__).resolve().parents[1]
NOTEBOOKS = REPO / "notebooks"
NAMES = (
    "01_estuary_demo.ipynb",
    "02_verification_gaussian.ipynb",
    "03_ensemble.ipynb",
    "04_source_attribution.ipynb",
)
CELL_TIMEOUT = 300  # s, per cell
FIGURE_CALLS = ("plt.show()", "display(Image(")


def _stored(name: str) -> nbformat.NotebookNode:
    return nbformat.read(NOTEBOOKS / name, as_version=4)


def _shows_figure(cell: nbformat.NotebookNode) -> bool:
    return cell.cell_type == "code" and any(call in cell.source for call in FIGURE_CALLS)


def _pngs(cell: nbformat.NotebookNode) -> int:
    return sum("image/png" in out.get("data", {}) for out in cell.get("outputs", []))


def _text(cell: nbformat.NotebookNode) -> str:
    return "".join(out.get("text", "") for out in cell.get("outputs", []))


def _repo_outputs() -> dict[Path, int]:
    """Output-like files (NetCDF, figures, CSV) in the repository, with their modification times."""
    kinds = {".nc", ".png", ".gif", ".csv"}
    files = (p for p in REPO.rglob("*") if p.suffix in kinds and ".git" not in p.parts)
    return {p: p.stat().st_mtime_ns for p in files}


@pytest.fixture(scope="module")
def executed(tmp_path_factory) -> dict[str, tuple[nbformat.NotebookNode, Path]]:
    """Every notebook executed once in its own temporary folder (shared by the tests below)."""
    before = _repo_outputs()
    out: dict[str, tuple[nbformat.NotebookNode, Path]] = {}
    mp = pytest.MonkeyPatch()
    try:
        for name in NAMES:
            folder = tmp_path_factory.mktemp(Path(name).stem)
            copy = Path(shutil.copy(NOTEBOOKS / name, folder / name))
            mp.setenv("WALKERS_FIGURE_DIR", str(folder))
            mp.setenv("TMPDIR", str(folder))  # the notebooks' own temporary folders go here
            nb = nbformat.read(copy, as_version=4)
            client = NotebookClient(
                nb,
                timeout=CELL_TIMEOUT,
                kernel_name="python3",
                resources={"metadata": {"path": str(folder)}},
            )
            client.execute()  # raises CellExecutionError on the first failing cell
            out[name] = (nb, folder)
    finally:
        mp.undo()
    after = _repo_outputs()
    changed = sorted(str(p.relative_to(REPO)) for p in after if after[p] != before.get(p))
    assert not changed, f"executing the notebooks wrote into the repository: {changed}"
    return out


@pytest.mark.parametrize("name", NAMES)
def test_notebook_is_stored_without_outputs(name: str) -> None:
    nb = _stored(name)
    code = [c for c in nb.cells if c.cell_type == "code"]
    assert code, f"{name} has no code"
    for cell in code:
        assert cell.outputs == [] and cell.execution_count is None, (
            f"{name}: stored with outputs; clear them before committing"
        )


@pytest.mark.parametrize("name", NAMES)
def test_notebook_opens_with_purpose_and_caution(name: str) -> None:
    first = _stored(name).cells[0]
    assert first.cell_type == "markdown"
    assert first.source.startswith("# ")
    assert walkers.CAUTION in first.source


@pytest.mark.parametrize("name", NAMES)
def test_notebook_runs_and_draws_its_figures(executed, name: str) -> None:
    nb, _ = executed[name]
    errors = [
        out
        for cell in nb.cells
        for out in cell.get("outputs", [])
        if out.get("output_type") == "error"
    ]
    assert not errors
    figure_cells = [c for c in nb.cells if _shows_figure(c)]
    assert len(figure_cells) >= 3, f"{name}: expected at least three figures"
    for cell in figure_cells:
        assert _pngs(cell) >= 1, f"{name}: no figure from cell:\n{cell.source[:200]}"


def test_estuary_notebook_closes_the_mass_budget(executed) -> None:
    nb, _ = executed["01_estuary_demo.ipynb"]
    text = "\n".join(_text(c) for c in nb.cells if c.cell_type == "code")
    assert "largest budget residual" in text
    assert "bathing beach: peak" in text and "mg/L" in text


def test_verification_notebook_saves_its_convergence_figure(executed) -> None:
    nb, folder = executed["02_verification_gaussian.ipynb"]
    figure = folder / "particles_vs_gaussian.png"
    assert figure.is_file() and 0 < figure.stat().st_size < 200_000
    text = "\n".join(_text(c) for c in nb.cells if c.cell_type == "code")
    assert "fitted slope" in text and "K 20 % too big" in text


def test_ensemble_notebook_reports_probabilities(executed) -> None:
    nb, _ = executed["03_ensemble.ipynb"]
    text = "\n".join(_text(c) for c in nb.cells if c.cell_type == "code")
    assert "members in" in text and "probability" in text
    assert "largest change" in text
