"""The Python API (abm.api): its docstring examples run, and so does the README's notebook session."""

from __future__ import annotations

import doctest
import re
from pathlib import Path

import pytest

import abm
import abm.api
import abm.world.words

ROOT = Path(__file__).resolve().parents[1]


@pytest.mark.parametrize("module", [abm.api, abm.world.words], ids=lambda m: m.__name__)
def test_docstring_examples_run(module, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.chdir(tmp_path)  # examples write under their own temporary folders; nothing lands in the checkout
    failed, tried = doctest.testmod(module, optionflags=doctest.ELLIPSIS)
    assert tried > 0 and failed == 0


def test_api_is_reachable_from_the_package() -> None:
    assert abm.simulate is abm.api.simulate and set(abm.api.__all__) <= set(dir(abm)) | set(abm.__all__)
    with pytest.raises(AttributeError):
        abm.no_such_call  # noqa: B018


def test_readme_notebook_session_runs(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    section = readme[readme.index("## Use from Python"):]
    code = re.search(r"```python\n(.*?)```", section, re.S).group(1)
    assert len(code.strip().splitlines()) <= 12
    monkeypatch.chdir(tmp_path)
    namespace: dict = {}
    exec(compile(code, "README.md (Use from Python)", "exec"), namespace)  # noqa: S102 - our own README
    assert (tmp_path / "outputs" / "rail" / "run_report.html").is_file()
