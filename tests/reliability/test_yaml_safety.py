"""The config loader builds no Python objects from YAML tags (PyYAML's safe
loader): a file asking for one is refused with a ConfigError naming the file,
and nothing it asks for is executed."""

from __future__ import annotations

import subprocess
from pathlib import Path

import pytest

from probeflow.config import load_config
from probeflow.errors import ConfigError

HEADER = "site: test-works\nprobes:\n  - id: tank-3\n"


@pytest.mark.parametrize("tagged", [
    "service: !!python/object:probeflow.config.models.ServiceSettings {batch_ms: 5}\n",
    "extra: !!python/object/apply:os.mkdir ['{marker}']\n",
    "extra: !!python/object/new:os.mkdir ['{marker}']\n",
    "extra: !!python/name:os.system\n",
    "extra: !!python/module:os\n",
])
def test_python_tags_are_refused_and_never_run(tmp_path: Path, tagged: str) -> None:
    marker = tmp_path / "created-by-yaml"
    path = tmp_path / "tagged.yaml"
    path.write_text(HEADER + tagged.replace("{marker}", str(marker)), encoding="utf-8")
    with pytest.raises(ConfigError) as caught:
        load_config(path)
    assert str(path) in str(caught.value)
    assert caught.value.path == str(path)
    assert not marker.exists()


def test_check_refuses_a_tagged_file_with_exit_status_2(tmp_path: Path, cli: list[str],
                                                         cli_env: dict[str, str]) -> None:
    marker = tmp_path / "created-by-yaml"
    path = tmp_path / "tagged.yaml"
    path.write_text(HEADER + f"extra: !!python/object/apply:os.mkdir ['{marker}']\n", encoding="utf-8")
    done = subprocess.run([*cli, "check", "--config", str(path)], capture_output=True, text=True, check=False,
                          env=cli_env, timeout=60)
    assert done.returncode == 2
    assert str(path) in done.stderr and "YAML" in done.stderr
    assert not marker.exists()
