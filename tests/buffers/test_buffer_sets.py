"""User buffer sets from YAML: a good file loads, a bad one names the file and the key."""

from __future__ import annotations

from pathlib import Path

import pytest

from probeflow.buffers import BufferSet, buffer_ph, load_buffer_set
from probeflow.errors import BufferRangeError, ConfigError

GOOD = """\
name: riverside-lab
buffers:
  - standard: phosphate_1_1
  - name: lab-red-4
    nominal_ph: 4.01
    source: invented demo certificate
    table:
      10: 4.00
      20: 4.00
      30: 4.02
      40: 4.04
  - name: lab-blue-10
    nominal_ph: 10.01
    table: [[5, 10.25], [25, 10.01], [45, 9.86]]
"""


def _write(tmp_path: Path, text: str) -> Path:
    path = tmp_path / "buffers.yaml"
    path.write_text(text, encoding="utf-8")
    return path


def test_good_file_loads_and_interpolates(tmp_path: Path) -> None:
    bset = load_buffer_set(_write(tmp_path, GOOD))
    assert isinstance(bset, BufferSet)
    assert bset.name == "riverside-lab"
    assert bset.names == ("phosphate_1_1", "lab-red-4", "lab-blue-10")
    # a table point comes back exactly; the shipped buffer is the same object as buffer_ph's
    assert bset.ph("lab-red-4", 30.0) == 4.02
    assert bset.ph("phosphate_1_1", 37.0) == buffer_ph("phosphate_1_1", 37.0)
    # three rows -> the parabola through them (not-a-knot spline of three points)
    t = 15.0
    # Lagrange parabola through (5, 10.25), (25, 10.01), (45, 9.86)
    lagrange = (10.25 * (t - 25) * (t - 45) / ((5 - 25) * (5 - 45))
                + 10.01 * (t - 5) * (t - 45) / ((25 - 5) * (25 - 45))
                + 9.86 * (t - 5) * (t - 25) / ((45 - 5) * (45 - 25)))
    assert bset.ph("lab-blue-10", t) == pytest.approx(lagrange, abs=1e-12)
    with pytest.raises(BufferRangeError, match="lab-red-4.*45.*10 to 40"):
        bset.ph("lab-red-4", 45.0)


@pytest.mark.parametrize(
    ("text", "key", "words"),
    [
        ("buffers: []\n", "name", "missing"),
        ("name: x\nbuffers:\n  - name: a\n    nominal_ph: 4\n    table: {10: 4.0}\n",
         "buffers[0].table", "at least two"),
        ("name: x\nbuffers:\n  - name: a\n    nominal_ph: four\n    table: {10: 4.0, 20: 4.0}\n",
         "buffers[0].nominal_ph", "not a number"),
        ("name: x\nbuffers:\n  - name: a\n    nominal_ph: 4\n    table: {10: 4.0, 20: abc}\n",
         "buffers[0].table.20", "not a number"),
        ("name: x\nbuffers:\n  - name: a\n    nominal_ph: 4\n    table: {10: 4.0, 20: 40.0}\n",
         "buffers[0].table.20", "outside"),
        ("name: x\nbuffers:\n  - standard: phthalate\n", "buffers[0].standard", "unknown buffer"),
        ("name: x\nbuffers:\n  - name: a\n    nominal_ph: 4\n    tabel: {10: 4.0, 20: 4.0}\n",
         "buffers[0]", "unknown key"),
        ("name: x\nbuffers:\n  - standard: borax_0.01\n  - standard: borax_0.01\n",
         "buffers", "more than once"),
    ],
)
def test_bad_file_names_file_and_key(tmp_path: Path, text: str, key: str, words: str) -> None:
    path = _write(tmp_path, text)
    with pytest.raises(ConfigError) as info:
        load_buffer_set(path)
    err = info.value
    assert err.path == str(path)
    assert str(path) in str(err)
    assert any(k == key and words in m for k, m in err.problems), err.problems


def test_yaml_syntax_error_gives_line(tmp_path: Path) -> None:
    path = _write(tmp_path, "name: x\nbuffers: [\n  - a: b\n")
    with pytest.raises(ConfigError, match=r"not valid YAML at line \d"):
        load_buffer_set(path)


def test_missing_file(tmp_path: Path) -> None:
    with pytest.raises(ConfigError, match="Cannot read buffer set file"):
        load_buffer_set(tmp_path / "nope.yaml")
