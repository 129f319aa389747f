"""Tests of the HTML report: one self-contained file, plots and findings table present, and a
real browser (headless Chromium) renders it without console errors."""

from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from PIL import Image

from harmonize.check import Accounting, CheckResult, TraitInfo, check_values
from harmonize.report_html import FLAG_COLOUR, render_report


def invented_result() -> CheckResult:
    """INVENTED values: four sources of one species' mass and body temperature; source 'c'
    wrote grams under a kg label (×1000) and source 'd' wrote °F under a °C label."""
    rng = np.random.default_rng(11)
    frames = []
    for source in "abcde":
        mass = 20 * np.exp(rng.normal(0, 0.1, 25)) * (1000 if source == "c" else 1)
        tb = rng.normal(31, 1.0, 25)
        tb = tb * 1.8 + 32 if source == "d" else tb  # NIST SP 811, B.9
        frames.append(
            pd.DataFrame(
                {
                    "trait": "body_mass_wet",
                    "group": source,
                    "taxon": "Inventus alpha",
                    "value": mass,
                }
            )
        )
        frames.append(
            pd.DataFrame(
                {
                    "trait": "body_temperature",
                    "group": source,
                    "taxon": "Inventus alpha",
                    "value": tb,
                }
            )
        )
    observations = pd.concat(frames, ignore_index=True)
    traits = {
        "body_mass_wet": TraitInfo("body_mass_wet", "gram", (1e-6, 2e8)),
        "body_temperature": TraitInfo(
            "body_temperature", "degree_Celsius", (-10.0, 56.0), (1.0, 0.0)
        ),
    }
    findings, observations = check_values(observations, traits, "source")
    accounting = Accounting((("values checked", len(observations)),), True)
    return CheckResult(
        "invented demo values", "source", tuple(findings), accounting, observations, traits
    )


def test_report_is_one_self_contained_file() -> None:
    page = render_report(invented_result())
    assert page.startswith("<!DOCTYPE html>") and page.count("<svg") == 2
    assert "<script" not in page.lower()
    # nothing fetched from elsewhere: no src/href attributes; url() only to ids inside the page
    assert not re.search(r"\s(src|href)\s*=", page)
    assert re.findall(r"url\((.)", page) and set(re.findall(r"url\((.)", page)) == {"#"}
    assert 'id="findings"' in page and 'id="accounting"' in page
    assert page.count('<tr class="warning">') >= 2
    assert FLAG_COLOUR in page  # the flagged groups are drawn in the flag colour


def test_clean_report_says_no_findings() -> None:
    result = invented_result()
    clean = CheckResult(result.subject, result.group_by, (), result.accounting,
                        result.observations.assign(flagged=False), result.traits)  # fmt: skip
    page = render_report(clean)
    assert 'id="no-findings"' in page and FLAG_COLOUR not in page


def test_report_renders_in_headless_chromium(tmp_path: Path) -> None:
    browser = shutil.which("chromium") or shutil.which("chromium-browser")
    if browser is None:
        pytest.skip("chromium is not installed (.ci/run installs the Debian package 'chromium')")
    page = tmp_path / "report.html"
    page.write_text(render_report(invented_result()), encoding="utf-8")
    common = [browser, "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
              "--enable-logging=stderr", "--v=0", "--window-size=1280,2000"]  # fmt: skip
    shot = tmp_path / "report.png"
    run = subprocess.run([*common, f"--screenshot={shot}", page.as_uri()],
                         capture_output=True, text=True, timeout=120)  # fmt: skip
    dom = subprocess.run([*common, "--dump-dom", page.as_uri()],
                         capture_output=True, text=True, timeout=120)  # fmt: skip
    assert shot.is_file(), run.stderr[-2000:]
    for stderr in (run.stderr, dom.stderr):
        assert "Uncaught" not in stderr and "CONSOLE" not in stderr
    assert dom.stdout.count("<svg") == 2 and 'id="findings"' in dom.stdout
    assert "×1000" in dom.stdout and "°F scale" in dom.stdout
    pixels = np.asarray(Image.open(shot).convert("L"), dtype=float)
    assert pixels.shape == (2000, 1280) and pixels.std() > 10  # not a blank page
    red = np.asarray(Image.open(shot).convert("RGB"), dtype=int)
    flagged = (red[..., 0] > 150) & (red[..., 1] < 90) & (red[..., 2] < 90)
    assert flagged.sum() > 50  # the flagged groups are drawn in red
