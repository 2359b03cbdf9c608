"""The per-run estimates cache: every estimator over the days a run's summary covers, kept in the run folder.

:func:`cached_estimates` is the summary extension of a batch store, so batch workers preload this module
(``abm.cli.BATCH_EXTENSION_MODULES``); it must not import ``scipy.stats``."""

from __future__ import annotations

import functools
import hashlib
import json
from pathlib import Path

from ... import estimate as estimate_package
from ... import observed as observed_module
from ...estimate.results import DEFAULT_LEVEL, EstimateResult
from ...records import write_json
from .estimates import _flat_estimates, _results_for_run
from .runs import summarised_days


ESTIMATES_CACHE = "estimates_summary.json"


@functools.cache
def estimators_fingerprint() -> str:
    """SHA-256 over the source of the estimators and the observed schema they read.

    A cached result is trusted only under the code that computed it: a changed
    estimator (a fix, a new method) recomputes every run's cache instead of a
    briefing quietly showing the old figures.
    """
    sources = sorted(Path(estimate_package.__file__).parent.glob("*.py")) + [Path(observed_module.__file__)]
    digest = hashlib.sha256()
    for source in sources:
        digest.update(source.name.encode() + b"\0" + source.read_bytes() + b"\0")
    return digest.hexdigest()


def cached_results(run_dir: str | Path) -> tuple[list[EstimateResult], list[tuple[str, str]]]:
    """Every estimator over the days the run's summary covers, at the default level with the world's sensitivities.

    The window is the one of the run's other summary figures (the warm-up left
    out, as the briefing does). Kept in ``RUN_DIR/estimates_summary.json``:
    derived from the run's own observed records, written atomically, naming
    its window, level and :func:`estimators_fingerprint`, and recomputed when
    it is missing, covers other days or came from other estimator code. A
    batch's workers write it as each run finishes; the store's summary columns
    (:func:`cached_estimates`) and the briefing's estimator check read it.
    """
    window = summarised_days(run_dir)
    path = Path(run_dir) / ESTIMATES_CACHE
    if path.is_file():
        cached = json.loads(path.read_text(encoding="utf-8"))
        same_request = cached.get("window") == list(window) and cached.get("level") == DEFAULT_LEVEL
        if same_request and cached.get("estimators") == estimators_fingerprint() and "results" in cached:
            results = [EstimateResult.from_dict(r) for r in cached["results"]]
            return results, [(str(name), str(why)) for name, why in cached["failures"]]
    results, failures = _results_for_run(run_dir, window)
    # parameters as pairs: they keep the order each estimator reports them in (JSON objects are written sorted)
    written = [{**r.to_dict(), "parameters": [list(p) for p in r.parameters]} for r in results]
    record = {"window": list(window), "level": DEFAULT_LEVEL, "estimators": estimators_fingerprint()}
    write_json({**record, "results": written, "failures": failures}, path)
    return results, failures


def cached_estimates(run_dir: str | Path) -> dict[str, float | None]:
    """:func:`estimates_for_run` over the days the run's summary covers, from :func:`cached_results`.

    The summary extension a batch store uses for its ``est_`` columns, so they
    estimate what the summary's other figures count.
    """
    return _flat_estimates(*cached_results(run_dir))
