"""The generated configuration reference documents what the config models actually accept."""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

import pytest
from pydantic import ValidationError

from probeflow.config.models import CalibrationSpec, ConfigFileModel, ProbeConfig
from probeflow.rules.config import BandRuleConfig, RulesConfig
from tests.views.conftest import REPO


@pytest.fixture(scope="module")
def reference(tmp_path_factory: pytest.TempPathFactory) -> str:
    out = tmp_path_factory.mktemp("ref") / "config-reference.md"
    done = subprocess.run([sys.executable, str(REPO / "tools" / "gen_config_reference.py"),
                           "--out", str(out)], capture_output=True, text=True, cwd=REPO, check=False)
    assert done.returncode == 0, done.stderr
    return out.read_text(encoding="utf-8")


def section(text: str, heading: str) -> str:
    start = text.index(heading)
    nxt = re.search(r"\n#{2,5} ", text[start + len(heading):])
    return text[start: start + len(heading) + (nxt.start() if nxt else len(text))]


@pytest.mark.parametrize(("heading", "model"), [
    ("## Top level", ConfigFileModel), ("### `probes[]`", ProbeConfig),
    ("#### `probes[].calibration`", CalibrationSpec), ("## `rules`", RulesConfig),
    ("### `rules.bands[]`", BandRuleConfig),
])
def test_every_key_of_a_model_is_documented(reference: str, heading: str, model: type) -> None:
    part = section(reference, heading)
    for key in model.model_fields:
        assert f"| `{key}` |" in part, f"{key} missing under {heading}"


def test_documented_ranges_match_what_the_model_accepts(reference: str) -> None:
    row = next(line for line in section(reference, "#### `probes[].calibration`").splitlines()
               if line.startswith("| `slope_pct` |"))
    lo, hi = (float(x) for x in re.search(r">= ([\d.]+), <= ([\d.]+)", row).groups())
    CalibrationSpec(offset_mv=0.0, slope_pct=lo)
    CalibrationSpec(offset_mv=0.0, slope_pct=hi)
    for outside in (lo - 0.01, hi + 0.01):
        with pytest.raises(ValidationError):
            CalibrationSpec(offset_mv=0.0, slope_pct=outside)


def test_checked_in_reference_is_current() -> None:
    """docs/config-reference.md is regenerated whenever a model changes."""
    done = subprocess.run([sys.executable, str(REPO / "tools" / "gen_config_reference.py"), "--check"],
                          capture_output=True, text=True, cwd=REPO, check=False)
    assert done.returncode == 0, done.stderr
    assert Path(REPO / "docs" / "config-reference.md").exists()
