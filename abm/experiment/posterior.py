"""Unknowns drawn from a calibration's posterior, for an experiment file's ``calibration:`` key.

A calibration output folder (written by ``undertow calibrate``) holds
``calibration.json`` (the calibration file's content, with its priors' paths,
labels and ``multiply`` flags, and ``calibration_sha256``) and
``posterior.parquet`` (one row per particle: a column per prior label, latent
columns, ``weight``, ``distance``, ``simulation``). Only those two files are
read, as plain data: the experiment layer does not import the calibration
package, which sits above it.

Replication ``r`` takes particle ``draws[r]``: a weighted resample, with
replacement, from a stream of the experiment's root seed with its own spawn
key, so the draws do not depend on the design points and every point runs
replication ``r`` with the same unknowns (common random numbers, as for the
seeds). Its values enter the world as the calibration wrote them
(:func:`abm.world.paths.apply_unknowns`), before the point's own changes.

The posterior's digest is taken over the values that drive runs (each
unknown's column and ``weight``, in file column order, as exact floats), not
over the file's bytes: a rewrite of the same particles (another Parquet
writer, compression or metadata) is the same posterior, and a batch resumed
against it runs the same worlds.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Collection, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..world import WorldFileError, parse_world
from ..world.paths import PathProblem, apply_changes, apply_unknowns, get_path, holds_numbers, set_or_scale

CALIBRATION_HEADER = "calibration.json"
POSTERIOR_TABLE = "posterior.parquet"
DRAW_COLUMN = "posterior_draw"  # the run table's column of the particle (row of posterior.parquet) a run drew
# Summary columns made per method or by summary extensions; an unknown named like one would be overwritten.
_FIGURE_PREFIXES = ("method_", "est_")
# Two-element spawn keys never equal a replication's one-element key; the design stream uses (0x0DE5, 0).
_POSTERIOR_SPAWN_KEY = (0xCA1B, 0)


class PosteriorProblem(ValueError):
    """A calibration folder that cannot drive an experiment's unknowns. ``str()`` is one line."""


@dataclass(frozen=True)
class Unknown:
    """One calibrated unknown: its run-table label, dotted world path and whether it multiplies."""

    label: str
    path: str
    multiply: bool


@dataclass(frozen=True, eq=False)
class Posterior:
    """A calibration's posterior particles and the particle each replication draws."""

    folder: Path
    name: str  # the calibration's name
    calibration_sha256: str
    unknowns: tuple[Unknown, ...]
    values: np.ndarray  # particles x unknowns
    weights: np.ndarray  # normalised to sum 1
    sha256: str  # digest of the unknowns' columns and the weights (module docstring)
    draws: tuple[int, ...]  # particle row per replication

    @property
    def particles(self) -> int:
        """How many particles the posterior holds."""
        return len(self.weights)

    def drawn(self, replication: int) -> dict[str, float]:
        """Label -> value of the unknowns replication ``replication`` runs with."""
        row = self.values[self.draws[replication]]
        return {u.label: float(v) for u, v in zip(self.unknowns, row, strict=True)}

    def run_values(self, replication: int) -> dict[str, Any]:
        """The run-table columns (and manifest values) a replication adds: the particle drawn, then its values."""
        return {DRAW_COLUMN: self.draws[replication], **self.drawn(replication)}

    def apply(self, world: dict[str, Any], particle: int) -> dict[str, Any]:
        """``world`` with one particle's values set at (or multiplied into) the unknowns' paths."""
        row = self.values[particle]
        return apply_unknowns(world, ((u.path, float(v), u.multiply) for u, v in zip(self.unknowns, row, strict=True)))

    def identity(self) -> dict[str, Any]:
        """What of the posterior determines the batch's results, for the plan's digest."""
        return {"unknowns": [[u.label, u.path, u.multiply] for u in self.unknowns], "posterior_sha256": self.sha256}

    def record(self) -> dict[str, Any]:
        """The batch manifest's account of the calibration the unknowns came from."""
        return {
            "folder": str(self.folder.resolve()),
            "name": self.name,
            "calibration_sha256": self.calibration_sha256,
            "posterior_sha256": self.sha256,
            "particles": self.particles,
            "unknowns": [{"label": u.label, "path": u.path, "multiply": u.multiply} for u in self.unknowns],
            "draws": list(self.draws),
        }

    def describe(self) -> str:
        """One phrase for ``undertow check``."""
        return (
            f"unknowns from calibration {self.name} ({self.folder}): "
            f"{len(self.unknowns)} parameters, {self.particles} particles"
        )

    def check_columns(self, factors: Mapping[str, str], reserved: Collection[str]) -> None:
        """The run-table columns this adds must be new: not a factor's (label -> key in the file), not reserved."""
        if DRAW_COLUMN in factors:
            where = factors[DRAW_COLUMN]
            raise PosteriorProblem(f"'{DRAW_COLUMN}' is the run-table column of the posterior draw; rename {where}")
        for unknown in self.unknowns:
            label = unknown.label
            if label in factors:
                where = factors[label]
                raise PosteriorProblem(
                    f"the unknown '{label}' and {where} would share a run-table column; give {where} another name"
                )
            if label in reserved or label == DRAW_COLUMN or label.startswith(_FIGURE_PREFIXES):
                raise PosteriorProblem(
                    f"the unknown '{label}' would take a run-table column of the batch; name that prior otherwise"
                )

    def check_world(self, world: dict[str, Any], points: Sequence[tuple[str, Mapping[str, Any]]]) -> None:
        """Every unknown's path must lead into ``world``, and the world at each particle drawn must validate.

        ``points`` are the design points, each as a description and its
        changes; every distinct particle drawn is checked with every point.
        """
        for unknown, value in zip(self.unknowns, self.values[self.draws[0]], strict=True):
            _check_path(world, unknown, float(value))
        # Each distinct particle once: replications that drew the same one run the same worlds.
        for particle in dict.fromkeys(self.draws):
            overlaid = self.apply(world, particle)
            for shown, changes in points:
                try:
                    parse_world(apply_changes(overlaid, dict(changes)), "<posterior draw>")
                except WorldFileError as exc:
                    row = zip(self.unknowns, self.values[particle], strict=True)
                    values = ", ".join(f"{u.label}={v:g}" for u, v in row)
                    raise PosteriorProblem(
                        f"posterior particle {particle} ({values}) at {shown}: in the world, {exc.path}: {exc.message}"
                    ) from None


def _check_path(world: dict[str, Any], unknown: Unknown, value: float) -> None:
    """An unknown's path must address the experiment's world (a multiplier's, numbers in it)."""
    missing = f"the unknown '{unknown.label}' is not in the experiment's world"
    try:
        changed = set_or_scale(world, unknown.path, value, unknown.multiply)
    except PathProblem as exc:
        raise PosteriorProblem(f"{missing}: {exc}") from None
    if unknown.multiply and not holds_numbers(get_path(world, unknown.path)):
        raise PosteriorProblem(f"the unknown '{unknown.label}' multiplies {unknown.path}, which holds no numbers")
    try:
        parse_world(changed, "<unknown>")
    except WorldFileError as exc:
        # A made-up key means the path is wrong; other problems are the value's, reported per draw and point.
        if exc.message.startswith("unknown key"):
            raise PosteriorProblem(f"{missing}: {unknown.path} does not exist ({exc.path}: {exc.message})") from None


def posterior_draws(seed: int, replications: int, weights: np.ndarray) -> tuple[int, ...]:
    """The particle each replication runs with: a weighted resample from the seed's posterior stream.

    Drawn with replacement one uniform per replication, so a batch with more
    replications keeps the first ones' draws.
    """
    rng = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=_POSTERIOR_SPAWN_KEY))
    return tuple(int(i) for i in rng.choice(len(weights), size=replications, replace=True, p=weights))


def read_posterior(folder: Path, seed: int, replications: int) -> Posterior:
    """Read a calibration output folder and draw each replication's particle; raise :class:`PosteriorProblem`."""
    if not folder.is_dir():
        raise PosteriorProblem(f"no calibration folder at {folder}")
    name, sha, unknowns = _read_header(folder / CALIBRATION_HEADER)
    table = folder / POSTERIOR_TABLE
    if not table.is_file():
        raise PosteriorProblem(f"no {POSTERIOR_TABLE} in {folder} (has the calibration finished?)")
    try:
        frame = pd.read_parquet(table)
    except (OSError, ValueError) as exc:
        raise PosteriorProblem(f"{table}: unreadable ({' '.join(str(exc).split())})") from None
    labels = [u.label for u in unknowns]
    missing = [c for c in (*labels, "weight") if c not in frame.columns]
    if missing:
        shown = ", ".join(repr(c) for c in missing)
        raise PosteriorProblem(f"{table}: no column {shown} (the calibration's priors name it)")
    if frame.empty:
        raise PosteriorProblem(f"{table}: holds no particles")
    try:
        values = frame[labels].to_numpy(dtype=float)
        weights = frame["weight"].to_numpy(dtype=float)
    except (TypeError, ValueError):
        raise PosteriorProblem(f"{table}: the unknowns' and weight columns must hold numbers") from None
    finite = np.isfinite(values).all() and np.isfinite(weights).all()
    if not (finite and (weights >= 0).all() and weights.sum() > 0):
        raise PosteriorProblem(f"{table}: values must be finite and weights non-negative with a positive sum")
    ordered = [c for c in frame.columns if c in {*labels, "weight"}]
    digest = _digest(ordered, frame[ordered].to_numpy(dtype=float))
    normalised = weights / weights.sum()
    draws = posterior_draws(seed, replications, normalised)
    return Posterior(folder, name, sha, unknowns, values, normalised, digest, draws)


def _read_header(header: Path) -> tuple[str, str, tuple[Unknown, ...]]:
    """The calibration's name, digest and unknowns, from calibration.json."""
    if not header.is_file():
        raise PosteriorProblem(f"no {CALIBRATION_HEADER} in {header.parent} (is it a folder undertow calibrate wrote?)")
    try:
        record = json.loads(header.read_text(encoding="utf-8"))
        calibration = record["calibration"]
        unknowns = tuple(
            Unknown(str(p.get("name") or p["path"]), str(p["path"]), bool(p.get("multiply", False)))
            for p in calibration["priors"]
        )
        return str(calibration.get("name", "")), str(record["calibration_sha256"]), unknowns
    except (OSError, UnicodeDecodeError, ValueError) as exc:
        raise PosteriorProblem(f"{header}: unreadable ({' '.join(str(exc).split())})") from None
    except (KeyError, TypeError, AttributeError):
        needs = "calibration.priors and calibration_sha256"
        raise PosteriorProblem(f"{header}: not a calibration record (it needs {needs})") from None


def _digest(columns: Collection[str], rows: np.ndarray) -> str:
    """SHA-256 of column names and float rows as canonical JSON (floats as their exact shortest repr)."""
    text = json.dumps({"columns": list(columns), "rows": rows.tolist()}, separators=(",", ":"))
    return hashlib.sha256(text.encode("utf-8")).hexdigest()
