"""Peak-field certificates: does a peak converge under refinement, or is it a field singularity?

A peak is followed through the passes of the adaptive loop (the largest |E| of its region near its
location) together with the local element size h there. If it settles, it is reported with the last
change as its error estimate. If it keeps growing as a power of h, it belongs to a sharp edge or
corner: the measured exponent (slope of log |E| against log h) is reported beside the one the
geometry predicts (see ``singularity``), with an edge radius that would bring the field down to the
allowed stress, and the value is never presented as the peak field.

The radius advice is a scaling estimate (common practice, no source): near a corner the field follows
c h^s; a rounding of radius rho removes the singularity and leaves a surface field of order c rho^s,
so rho = (E_allowed / c)^(1/s). Draw the radius and re-run to confirm. No radius is advised when rho
would exceed the element sizes the power law was measured on: the field is too high even away from
the corner, and the stress itself must come down.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .singularity import CornerTheory

CONVERGED, SINGULAR, NOT_CONVERGED, SINGLE_MESH = "converged", "singular", "not converged", "single mesh"
#: a measured or predicted exponent below this is a singularity, not a polygonal artefact of a curve
SINGULAR_EXPONENT = -0.05


@dataclass(frozen=True)
class PeakCertificate:
    status: str  # CONVERGED, SINGULAR, NOT_CONVERGED or SINGLE_MESH
    value: float  # V/m: the converged value, or (singular) the mesh-dependent value on the last pass
    relative_error: float | None  # estimate; None for a singularity
    measured_exponent: float | None  # slope of log|E| against log h over the last passes
    theory_exponent: float | None  # from the corner's angles and permittivities, if a conductor or boundary meets it
    field_angle_deg: float | None  # opening of the dielectric side of the corner
    advised_radius: float | None  # m, edge radius for the allowed field (singular only)
    history: tuple[float, ...]  # V/m, the value in each pass
    sizes: tuple[float, ...]  # m, the local element size in each pass

    @property
    def is_peak_field(self) -> bool:
        """Whether ``value`` may be quoted as the peak field (not for a singularity)."""
        return self.status != SINGULAR


def measured_exponent(values: list[float], sizes: list[float]) -> float | None:
    """Least-squares slope of log(value) against log(size) over the last three passes; None if h did not shrink."""
    v, h = np.log(values[-3:]), np.log(sizes[-3:])
    if len(v) < 2 or h.max() - h.min() < np.log(1.3):
        return None
    return float(np.polyfit(h, v, 1)[0])


def certify(values: list[float], sizes: list[float], theory: CornerTheory | None, tolerance: float,
            allowed_field: float | None, single_mesh_error: float | None = None) -> PeakCertificate:
    """Classify one peak from its history over the passes (oldest first)."""
    value = float(values[-1])
    theory_exponent = theory.exponent if theory is not None else None
    angle = float(np.degrees(theory.field_angle)) if theory is not None else None
    predicted_singular = theory_exponent is not None and theory_exponent < SINGULAR_EXPONENT
    slope = measured_exponent(values, sizes) if len(values) >= 2 else None
    change = abs(values[-1] - values[-2]) / value if len(values) >= 2 and value > 0 else None
    growing = len(values) >= 2 and values[-1] > values[-2] * (1 + 0.25 * tolerance)

    singular = False
    if len(values) == 1:
        singular = predicted_singular
    elif slope is not None and slope < SINGULAR_EXPONENT and growing:
        singular = True
    elif predicted_singular and growing and change is not None and change > tolerance:
        singular = True
    if singular:
        exponent = slope if slope is not None and slope < 0 else theory_exponent
        radius = None
        if allowed_field is not None and exponent is not None and exponent < 0:
            scale = value / sizes[-1] ** exponent  # c in |E| = c h^s
            radius = float((allowed_field / scale) ** (1.0 / exponent))
            if radius > max(sizes):
                # beyond the scale the power law was seen on: the field away from the corner is itself too
                # high, and no rounding alone brings it down
                radius = None
        return PeakCertificate(SINGULAR, value, None, slope, theory_exponent, angle, radius,
                               tuple(values), tuple(sizes))
    if len(values) == 1:
        return PeakCertificate(SINGLE_MESH, value, single_mesh_error, None, theory_exponent, angle, None,
                               tuple(values), tuple(sizes))
    status = CONVERGED if change is not None and change <= tolerance else NOT_CONVERGED
    return PeakCertificate(status, value, change, slope, theory_exponent, angle, None, tuple(values), tuple(sizes))
