"""The firewall: estimators read observed records only.

Every module under abm/estimate/ is parsed with ast. From the package it may
import only abm.observed, abm.errors and abm.estimate.*; and no string, name
or comment may mention a truth table.
"""

import ast
import io
import re
import tokenize
from pathlib import Path

import pytest

import abm.estimate

PACKAGE = Path(abm.estimate.__file__).parent
MODULES = sorted(PACKAGE.rglob("*.py"))
ALLOWED = re.compile(r"^abm\.(observed|errors|atomic|estimate)(\.|$)")  # atomic: writing files, no records
FORBIDDEN_WORD = "truth"


def module_name(path: Path) -> str:
    parts = path.relative_to(PACKAGE.parent.parent).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def imported_modules(source: str, package: str) -> list[str]:
    """Absolute names of everything a module in ``package`` imports (relative imports resolved)."""
    names = []
    for node in ast.walk(ast.parse(source)):
        if isinstance(node, ast.Import):
            names += [alias.name for alias in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                parts = package.split(".")
                stem = ".".join(parts[: len(parts) - node.level + 1] + ([node.module] if node.module else []))
            else:
                stem = node.module or ""
            # `from abm import model` imports abm.model: check each imported name too
            names += [f"{stem}.{alias.name}" for alias in node.names] if stem in ("abm", "abm.estimate") else [stem]
    return names


def package_of(path: Path) -> str:
    name = module_name(path)
    return name if path.name == "__init__.py" else name.rpartition(".")[0]


def test_there_are_modules_to_check():
    assert {"frequency.py", "removal.py", "expansion.py", "report.py"} <= {p.name for p in MODULES}


@pytest.mark.parametrize("path", MODULES, ids=lambda p: p.name)
def test_imports_only_observed_errors_and_estimate(path):
    names = imported_modules(path.read_text(), package_of(path))
    from_abm = [name for name in names if name == "abm" or name.startswith("abm.")]
    assert from_abm == [name for name in from_abm if ALLOWED.match(name)], f"{path.name} imports beyond the firewall"


def words_of(source: str) -> list[str]:
    """Every string constant, name, attribute, definition, argument, imported name and comment."""
    words = []
    for node in ast.walk(ast.parse(source)):
        if isinstance(node, ast.Constant) and isinstance(node.value, str):
            words.append(node.value)
        elif isinstance(node, ast.Name):
            words.append(node.id)
        elif isinstance(node, ast.Attribute):
            words.append(node.attr)
        elif isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef, ast.ClassDef)):
            words.append(node.name)
        elif isinstance(node, ast.arg):
            words.append(node.arg)
        elif isinstance(node, ast.alias):
            words += [node.name, node.asname or ""]
    tokens = tokenize.generate_tokens(io.StringIO(source).readline)
    return words + [tok.string for tok in tokens if tok.type == tokenize.COMMENT]


def firewall_breaches(source: str) -> list[str]:
    """Words that mention a truth table, and module paths in strings (importlib) beyond the firewall."""
    words = words_of(source)
    hits = [w for w in words if FORBIDDEN_WORD in w.lower()]
    hidden = re.findall(r"\babm\.[a-z_]+", " ".join(words))
    return hits + [name for name in hidden if not ALLOWED.match(name)]


@pytest.mark.parametrize("path", MODULES, ids=lambda p: p.name)
def test_no_string_name_or_comment_mentions_a_truth_table(path):
    assert firewall_breaches(path.read_text()) == []


def test_the_checker_catches_forbidden_imports():
    probe = "\n".join(
        ["from .. import model", "from ..records import X", "import abm.port.day", "from . import results",
         "from ..observed import conform"]
    )
    names = imported_modules(probe, "abm.estimate")
    assert names == ["abm.model", "abm.records", "abm.port.day", "abm.estimate.results", "abm.observed"]
    assert [n for n in names if not ALLOWED.match(n)] == ["abm.model", "abm.records", "abm.port.day"]


def test_the_checker_catches_truth_in_strings_names_and_comments():
    probe = "\n".join(
        ['x = tables["attempts_truth"]', "TruthTable = 1  # from the truth set", 'importlib.import_module("abm.model")']
    )
    expected = ["attempts_truth", "TruthTable", "# from the truth set", "abm.model"]
    assert sorted(firewall_breaches(probe)) == sorted(expected)
