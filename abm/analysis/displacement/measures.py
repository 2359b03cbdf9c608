"""The displacement measures, usable on their own: share distances, the weighted displacement quotient,
and the share shifts and area counts of two windows of attempts."""

from __future__ import annotations

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike
from scipy.spatial.distance import jensenshannon

from ...world.schema import AreaSelector, DisplacementAreas, World
from .result import AREAS, ShareShift, WeightedDisplacement
from .runs import DisplacementInputError


def total_variation(p: ArrayLike, q: ArrayLike) -> float:
    """Total-variation distance between two share vectors: half the sum of absolute differences."""
    return float(0.5 * np.abs(np.asarray(p, float) - np.asarray(q, float)).sum())


def jensen_shannon(p: ArrayLike, q: ArrayLike) -> float:
    """Jensen-Shannon distance (square root of the divergence), base 2 so it lies in [0, 1]."""
    return float(jensenshannon(np.asarray(p, float), np.asarray(q, float), base=2))


def weighted_displacement(
    rb: int, ra: int, db: int, da: int, cb: int, ca: int, has_buffer: bool = True
) -> WeightedDisplacement:
    """Bowers & Johnson's gross / net effect, success and buffer measures, WDQ and total net effect.

    ``r``, ``d``, ``c``: response, buffer and control counts; ``b`` before, ``a`` after.
    Undefined figures are None and ``flag`` / ``note`` say why (see :class:`WeightedDisplacement`).
    """
    counts = dict(
        response_before=int(rb), response_after=int(ra), buffer_before=int(db),
        buffer_after=int(da), control_before=int(cb), control_after=int(ca),
    )
    gross = counts["response_before"] - counts["response_after"]
    if cb == 0 or ca == 0:
        empty = "before" if cb == 0 else "after"
        # TNE needs only Cb; with Ca = 0 the control fell to nothing, so every before count scales to 0.
        tne = None if cb == 0 else float((rb * ca / cb - ra) + (db * ca / cb - da))
        return WeightedDisplacement(
            **counts, gross_effect=gross, net_effect=None, success_measure=None, buffer_displacement_measure=None,
            wdq=None, total_net_effect=tne, flag="control_empty",
            note=f"no control attempts {empty}: ratios to control are undefined, so no WDQ",
        )
    success = ra / ca - rb / cb
    buffer_measure = da / ca - db / cb
    tne = float((rb * ca / cb - ra) + (db * ca / cb - da))
    if not has_buffer:
        flag, wdq, note = "no_buffer", None, "no buffer options: WDQ needs a buffer area"
    elif success >= 0:
        flag, wdq = "no_success", None
        note = f"success measure {success:+.3f} >= 0: the response area did not fall against control; WDQ has no reading"
    else:
        flag, wdq = "ok", buffer_measure / success
        note = _wdq_reading(wdq)
    return WeightedDisplacement(
        **counts, gross_effect=gross, net_effect=-success, success_measure=success,
        buffer_displacement_measure=buffer_measure, wdq=wdq, total_net_effect=tne, flag=flag, note=note,
    )


def _wdq_reading(wdq: float) -> str:
    """Guerette (2009), appendix C: how to read a WDQ when the response succeeded."""
    if wdq > 1:
        return f"WDQ {wdq:.3f} > 1: diffusion of benefits into the buffer, larger than the direct effect"
    if wdq > 0:
        return f"WDQ {wdq:.3f} in (0, 1]: diffusion of benefits into the buffer"
    if wdq == 0:
        return "WDQ 0: neither displacement nor diffusion"
    if wdq >= -1:
        return f"WDQ {wdq:.3f} in [-1, 0): displacement into the buffer, smaller than the direct effect"
    return f"WDQ {wdq:.3f} < -1: displacement into the buffer outweighs the direct effect"


def _option_keys(world: World, dimension: str) -> list[str]:
    """Every value of a dimension in the world's option space, in world order."""
    names = {"point": world.point_names, "band": world.band_names, "vehicle_class": world.class_names,
             "depth": world.depth_names}  # fmt: skip
    if dimension == "option":
        return [f"{p}/{b}/{c}" for p in names["point"] for b in names["band"] for c in names["vehicle_class"]]
    return list(names[dimension])


def _share_shift(dimension: str, base_keys: list[str], before: pd.DataFrame, after: pd.DataFrame) -> ShareShift:
    b = before.groupby(dimension)["persons"].sum()
    a = after.groupby(dimension)["persons"].sum()
    # Keys outside the world's option space cannot come from a valid run, but counting them keeps shares summing to 1.
    extra = sorted((set(b.index) | set(a.index)) - set(base_keys))
    keys = base_keys + extra
    p = b.reindex(keys, fill_value=0).to_numpy(float)
    q = a.reindex(keys, fill_value=0).to_numpy(float)
    p, q = p / p.sum(), q / q.sum()
    return ShareShift(
        dimension, tuple(keys), tuple(p.tolist()), tuple(q.tolist()), total_variation(p, q), jensen_shannon(p, q)
    )


def _area_of_options(world: World, areas: DisplacementAreas) -> dict[str, str]:
    """Option key -> the one area it belongs to; an option in two areas would count twice, so it is refused."""

    def matches(selector: AreaSelector, point: str, band: str, cls: str) -> bool:
        given = (selector.point, selector.band, selector.vehicle_class)
        return all(g is None or g == value for g, value in zip(given, (point, band, cls)))

    owner: dict[str, str] = {}
    for point in world.point_names:
        for band in world.band_names:
            for cls in world.class_names:
                key = f"{point}/{band}/{cls}"
                for area in AREAS:
                    if any(matches(s, point, band, cls) for s in getattr(areas, area)):
                        if key in owner:
                            raise DisplacementInputError(
                                f"displacement areas: option {key} is in both the {owner[key]} and the {area} area"
                            )
                        owner[key] = area
    return owner


def _weighted(
    world: World, areas: DisplacementAreas, before: pd.DataFrame, after: pd.DataFrame
) -> WeightedDisplacement:
    owner = _area_of_options(world, areas)

    def counts(frame: pd.DataFrame) -> dict[str, int]:
        by_area = frame.groupby(frame["option"].map(owner))["persons"].sum()
        return {area: int(by_area.get(area, 0)) for area in AREAS}

    b, a = counts(before), counts(after)
    return weighted_displacement(
        b["response"], a["response"], b["buffer"], a["buffer"], b["control"], a["control"],
        has_buffer=bool(areas.buffer),
    )
