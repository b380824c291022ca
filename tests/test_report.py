"""`walkers report`: one self-contained HTML file, opened in a real headless browser.

The browser is Debian's chromium (installed by .ci/run and the README's test command). Under CI
(CI=true) a missing browser fails the test; elsewhere the test is skipped with the reason.
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from PIL import Image

import walkers
from walkers.cli import main
from walkers.errors import InputError
from walkers.outputs.report import report_html, write_report
from walkers.outputs.writer import write_results

sys.path.insert(0, str(Path(__file__).parent))
from results_fixture import gaussian_puff_results  # noqa: E402

BROWSER_FLAGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
]


def chromium() -> str:
    found = shutil.which("chromium") or shutil.which("chromium-browser")
    if found is None:
        if os.environ.get("CI") == "true":
            pytest.fail("chromium is not installed: .ci/run installs Debian's chromium package")
        pytest.skip("chromium is not installed (apt-get install -y chromium)")
    return found


def browse(page: Path, profile: Path, *args: str) -> subprocess.CompletedProcess:
    return subprocess.run(
        [chromium(), *BROWSER_FLAGS, f"--user-data-dir={profile}", *args, page.as_uri()],
        capture_output=True,
        text=True,
        timeout=120,
        check=True,
    )


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    folder = tmp_path_factory.mktemp("report")
    result = write_results(gaussian_puff_results(nt=7), folder / "puff.nc")
    runner = CliRunner()
    out = runner.invoke(main, ["report", str(result)])
    assert out.exit_code == 0, out.output
    return folder / "puff_report.html"


def test_report_is_self_contained_with_summary_budget_receptors_and_caution(report):
    text = report.read_text(encoding="utf-8")
    assert walkers.CAUTION in text
    for heading in ("Summary", "Mass budget", "Receptors", "Figures", "Scenario", "Provenance"):
        assert f"<h2>{heading}</h2>" in text
    assert text.count('src="data:image/png;base64,') == 3  # map, receptors, budget
    # nothing fetched from elsewhere: every src and href is inline
    assert not re.findall(r'(?:src|href)="(?!data:)', text)
    assert "http://" not in text and "https://" not in text


def test_report_renders_with_its_figures_in_a_headless_browser(report, tmp_path):
    dom = browse(report, tmp_path / "profile1", "--dump-dom").stdout
    assert 'data-figures-shown="3"' in dom  # the browser decoded all three PNGs
    shot = tmp_path / "page.png"
    browse(report, tmp_path / "profile2", "--window-size=1000,2400", f"--screenshot={shot}")
    with Image.open(shot) as image:
        rgb = np.asarray(image.convert("RGB"), dtype=int)
    assert rgb.shape[:2] == (2400, 1000)
    colourful = ((rgb.max(axis=2) - rgb.min(axis=2)) > 60).mean()
    assert colourful > 0.01  # the map's colours, not a blank page


def test_report_refuses_to_overwrite_and_refuses_an_ensemble(report):
    with pytest.raises(InputError, match="exists; pass --overwrite"):
        write_report(report.with_name("puff.nc"), report)
    ensemble = gaussian_puff_results(nt=3).expand_dims(member=2)
    with pytest.raises(InputError, match="not of an ensemble"):
        report_html(ensemble)
