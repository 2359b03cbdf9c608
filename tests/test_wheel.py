"""The wheel works outside a checkout: it carries the worlds, the demo's extract and the starter files.

The wheel is built from a copy of the project (nothing is written into the
checkout), installed without its dependencies into a fresh virtual environment
that borrows the test environment's installed libraries (a path line, which
does not pull in the checkout's own editable install), and run from a folder
outside the repository.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import sysconfig
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def _run(argv: list[str], cwd: Path, env: dict[str, str] | None = None) -> subprocess.CompletedProcess:
    result = subprocess.run(argv, cwd=cwd, capture_output=True, text=True, timeout=600, env=env)
    assert result.returncode == 0, f"{argv}: {result.stdout}\n{result.stderr}"
    return result


@pytest.fixture(scope="module")
def installed(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path, dict[str, str]]:
    """(the built wheel, the fresh environment's bin folder, a clean environment for its commands)."""
    base = tmp_path_factory.mktemp("wheel")
    source = base / "source"
    source.mkdir()
    for name in ("pyproject.toml", "README.md", "LICENSE"):
        shutil.copy2(ROOT / name, source / name)
    shutil.copytree(ROOT / "abm", source / "abm", ignore=shutil.ignore_patterns("__pycache__", "*.nbi", "*.nbc"))
    _run([sys.executable, "-m", "pip", "wheel", "--quiet", "--no-deps", "--no-build-isolation", "-w",
          str(base / "dist"), str(source)], cwd=base)
    wheel = next((base / "dist").glob("undertow-*.whl"))
    venv = base / "venv"
    _run([sys.executable, "-m", "venv", "--without-pip", str(venv)], cwd=base)
    site = next(venv.glob("lib/python*/site-packages"))
    # the dependencies come from this environment's site-packages, added as a plain path (its .pth files,
    # among them the checkout's editable install, are not run)
    (site / "borrowed.pth").write_text(sysconfig.get_paths()["purelib"] + "\n", encoding="utf-8")
    _run([sys.executable, "-m", "pip", "--python", str(venv / "bin" / "python"), "install", "--quiet", "--no-deps",
          str(wheel)], cwd=base)
    env = {k: v for k, v in os.environ.items() if not k.startswith(("PYTHON", "VIRTUAL_ENV"))}
    return wheel, venv / "bin", env


def test_wheel_holds_the_worlds_extract_starters_and_licence(installed: tuple[Path, Path, dict[str, str]]) -> None:
    names = set(zipfile.ZipFile(installed[0]).namelist())
    for needed in ("abm/worlds/kestrel_quay/world.yaml", "abm/worlds/kestrel_quay/demo_experiment.yaml",
                   "abm/worlds/kestrel_quay/calibration.yaml", "abm/worlds/kestrel_quay/observed_extract/checks.csv",
                   "abm/worlds/stonechat_rail/experiment.yaml", "abm/worlds/corran_ridge/world.yaml",
                   "abm/starter/world_rail.yaml"):
        assert needed in names, needed
    assert any(n.endswith(".dist-info/licenses/LICENSE") for n in names)
    metadata = next(n for n in names if n.endswith(".dist-info/METADATA"))
    text = zipfile.ZipFile(installed[0]).read(metadata).decode()
    assert "License-Expression: MIT" in text
    requires = [line for line in text.splitlines() if line.startswith("Requires-Dist:") and "extra ==" not in line]
    assert not any("pytest" in line for line in requires), "pytest is installed for every user"


def test_installed_tool_runs_outside_the_checkout(installed: tuple[Path, Path, dict[str, str]],
                                                   tmp_path: Path) -> None:
    _, bin_dir, env = installed
    undertow = str(bin_dir / "undertow")
    version = _run([undertow, "--version"], tmp_path, env).stdout
    assert version.startswith("undertow 0.") and "numpy" in version and "numba" in version and "mesa" in version
    where = _run([str(bin_dir / "python"), "-c", "import abm, abm.starter as s\nwith s.shipped_worlds() as w: "
                  "print(abm.__file__, (w / 'kestrel_quay/demo_experiment.yaml').is_file())"], tmp_path, env).stdout
    assert str(ROOT) not in where and where.split()[-1] == "True"  # the installed package, with the demo's files
    _run([undertow, "new", "example", "stonechat_rail", "rail"], tmp_path, env)
    checked = _run([undertow, "check", "rail/world.yaml", "rail/experiment.yaml"], tmp_path, env).stdout
    assert "rail/world.yaml: ok" in checked and "rail/experiment.yaml: ok" in checked
    ran = _run([undertow, "run", "rail/world.yaml", "--days", "3", "--seed", "1", "--out", "one"], tmp_path, env)
    assert "Missed trains" in ran.stdout and (tmp_path / "one" / "files.json").is_file()
