"""The bound on the drag coefficient that the rig's geometry allows: its ensemble's scale error as a C_D error.

A BB under quadratic drag, flying level across the field, travels x(s) = ln(1 + k s)/k = s − k s²/2 + …,
where s = v₀ t and k = ρ C_D A / (2 m) is its drag per metre (1/m); drag is the curvature of the path in
x against s, whatever the speed. A mapping error along the flight row, δx(x) = a + b (x − x̄) + c (x − x̄)²
(x̄: the field's centre), adds c to that curvature and scales x by (1 + b): the fit then reads
k′ ≈ k − 2c − b k, a relative C_D error of −2c/k − b. Each ensemble member of the rig is one draw of the
calibration's error (lens views, corner noise, the plane pose, taped offsets), so the spread of that
error over the members is the C_D error the geometry alone allows. One board at the centre fixes the
plane's tilt about the vertical poorly, and that tilt is a curvature of the scale; placements along the
field pin it.

Conventions
-----------
Pixels (u, v) in OpenCV order; the flight row is the image's middle row; world x downrange, metres.

References
----------
Hoerner, S. F. (1965). Fluid-Dynamic Drag, ch. 3 (a sphere's C_D ≈ 0.4 to 0.47 below the drag crisis).
# from memory
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from hopscope.shared.constants import DEFAULT_BB_DIAMETER_M

from .rig import Rig

#: The reference BB the bound is stated for: 0.25 g, the usual field weight. # common practice, no
#: published source
REFERENCE_BB_MASS_KG = 0.25e-3
#: Its drag coefficient: a smooth sphere below the drag crisis (Hoerner 1965, ch. 3). # from memory
REFERENCE_DRAG_COEFFICIENT = 0.4
#: Air density at 20 °C, 1013.25 hPa, dry, kg/m³ (ideal gas, R_d = 287.05 J/(kg K)). # from memory
REFERENCE_AIR_DENSITY_KGM3 = 1.204
#: Pixels sampled along the flight row.
ROW_SAMPLES = 41


@dataclass(frozen=True)
class DragBound:
    """The C_D bound of a rig (:func:`drag_bound`).

    Attributes
    ----------
    cd_relative : RMS over the ensemble members of the relative C_D error their mapping implies for the
        reference BB (dimensionless, 0.04 = 4 %); NaN without an ensemble.
    curvature_rms_per_m : RMS of the members' scale curvature c along the flight row, 1/m.
    scale_rms : RMS of the members' linear scale error b at the field's centre (dimensionless).
    field_m : length of the flight row on the plane, m.
    reference_k_per_m : drag per metre k of the reference BB, 1/m.
    reference_mass_kg : the reference BB's mass, kg.
    n_placements : board placements the plane pose came from (0 when the provenance does not say).
    members : ensemble members used.
    """

    cd_relative: float
    curvature_rms_per_m: float
    scale_rms: float
    field_m: float
    reference_k_per_m: float
    n_placements: int
    members: int
    reference_mass_kg: float = REFERENCE_BB_MASS_KG


def reference_drag_per_m() -> float:
    """k = ρ C_D A / (2 m) of the reference BB, 1/m (A = π d²/4)."""
    area = math.pi * DEFAULT_BB_DIAMETER_M**2 / 4
    return REFERENCE_AIR_DENSITY_KGM3 * REFERENCE_DRAG_COEFFICIENT * area / (2 * REFERENCE_BB_MASS_KG)


def drag_bound(rig: Rig) -> DragBound:
    """The relative C_D error the rig's own ensemble allows along the flight row (see the module docstring).

    Parameters
    ----------
    rig : the calibrated rig, with its ensemble.

    Returns
    -------
    DragBound; ``cd_relative`` is NaN when the rig has no ensemble or the row does not map.

    Notes
    -----
    Pixels (u, v) in OpenCV order; world x downrange, metres.
    """
    w, h = rig.image_size
    row = np.column_stack([np.linspace(0.0, w - 1.0, ROW_SAMPLES), np.full(ROW_SAMPLES, (h - 1) / 2)])
    x = rig.pixel_to_world(row)[:, 0]
    k_ref = reference_drag_per_m()
    placements = rig.provenance.get("plane", {}).get("placements", [])
    n_place = len(placements) if isinstance(placements, list) else 0
    nan = float("nan")
    ok = np.isfinite(x)
    if not rig.ensemble or ok.sum() < 3:
        return DragBound(nan, nan, nan, nan, k_ref, n_place, len(rig.ensemble))
    xi = x[ok] - x[ok].mean()
    errors = rig.ensemble_pixel_to_world(row[ok])[:, :, 0] - x[ok][None]
    curv, scale = [], []
    for e in errors:
        good = np.isfinite(e)
        if good.sum() < 3:
            continue
        c, b, _ = np.polyfit(xi[good], e[good], 2)
        curv.append(c)
        scale.append(b)
    if not curv:
        return DragBound(nan, nan, nan, float(np.ptp(x[ok])), k_ref, n_place, len(rig.ensemble))
    c_arr, b_arr = np.asarray(curv), np.asarray(scale)
    rel = -2 * c_arr / k_ref - b_arr
    return DragBound(
        cd_relative=float(np.sqrt(np.mean(rel**2))),
        curvature_rms_per_m=float(np.sqrt(np.mean(c_arr**2))),
        scale_rms=float(np.sqrt(np.mean(b_arr**2))),
        field_m=float(np.ptp(x[ok])),
        reference_k_per_m=k_ref,
        n_placements=n_place,
        members=len(curv),
    )
