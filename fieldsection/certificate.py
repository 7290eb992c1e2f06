"""Peak-field certificates: does a peak converge under refinement, or is it a field singularity?

A peak is followed through the passes of the adaptive loop (the largest |E| of its region near its
location) together with the local element size h there. If it settles, it is reported with the last
change as its error estimate. If it keeps growing as a power of h, it belongs to a sharp edge or
corner: the measured exponent (slope of log |E| against log h) is reported beside the one the
geometry predicts (see ``singularity``), with an edge radius that would bring the field down to the
allowed stress, and the value is never presented as the peak field.

The radius advice is a scaling estimate (common practice, no source): near a corner the field follows
c r^s (c fitted on the last mesh between 4 and 16 element sizes from the corner, the largest over
directions); a rounding of radius rho removes the singularity and leaves a surface field of order
c rho^s, so rho = (E_allowed / c)^(1/s). Draw the radius and re-run to confirm. No radius is
advised when rho would exceed the element sizes the power law was measured on: the field is too
high even away from the corner, and the stress itself must come down.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .singularity import SINGULAR_EXPONENT, CornerTheory

CONVERGED, SINGULAR, NOT_CONVERGED, SINGLE_MESH = "converged", "singular", "not converged", "single mesh"


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
    if min(values[-3:]) <= 0:
        return None
    v, h = np.log(values[-3:]), np.log(sizes[-3:])
    if len(v) < 2 or h.max() - h.min() < np.log(1.3):
        return None
    return float(np.polyfit(h, v, 1)[0])


def certify(values: list[float], sizes: list[float], theory: CornerTheory | None, tolerance: float,
            allowed_field: float | None, single_mesh_error: float | None = None, negligible: float = 0.0,
            corner_constant: float | None = None) -> PeakCertificate:
    """Classify one peak from its history over the passes (oldest first).

    ``theory``: the corner exponent where the peak sits at a corner of the geometry (None elsewhere).
    A peak at a corner the theory calls singular is singular once it grows; at a corner it calls
    regular, never. Elsewhere (a corner between dielectrics only, or none) it is singular only when it
    has grown in each of the last two passes by a step no smaller than the one before (a converging
    value's steps shrink) with a slope below ``SINGULAR_EXPONENT``. ``negligible``: a field below it is
    round-off, reported as a converged 0. ``corner_constant``: c in |E| = c r^s fitted around the
    corner on the last mesh, for the radius advice (else c comes from the peak and the element size).
    """
    value = float(values[-1])
    theory_exponent = theory.exponent if theory is not None else None
    angle = float(np.degrees(theory.field_angle)) if theory is not None else None
    history, spacing = tuple(values), tuple(sizes)
    if value <= negligible:
        return PeakCertificate(CONVERGED, 0.0, 0.0, None, theory_exponent, angle, None, history, spacing)
    slope = measured_exponent(values, sizes) if len(values) >= 2 else None
    change = abs(values[-1] - values[-2]) / value if len(values) >= 2 else None
    growing = len(values) >= 2 and values[-1] > values[-2] * (1 + 0.25 * tolerance)

    if len(values) == 1:
        singular = theory is not None and theory.singular_enough
    elif theory is not None:
        singular = theory.singular_enough and growing and change > tolerance
    else:
        steps = np.diff(values[-3:])
        singular = (len(values) >= 3 and bool(np.all(steps > 0)) and steps[-1] >= 0.9 * steps[0]
                    and slope is not None and slope < SINGULAR_EXPONENT)
    if singular:
        exponent = theory_exponent if theory is not None else slope
        radius = None
        if allowed_field is not None and exponent is not None and exponent < 0:
            scale = corner_constant if corner_constant is not None else value / sizes[-1] ** exponent
            radius = float((allowed_field / scale) ** (1.0 / exponent))
            if radius > max(sizes):
                # beyond the scale the power law was seen on: the field away from the corner is itself too
                # high, and no rounding alone brings it down
                radius = None
        return PeakCertificate(SINGULAR, value, None, slope, theory_exponent, angle, radius, history, spacing)
    if len(values) == 1:
        return PeakCertificate(SINGLE_MESH, value, single_mesh_error, None, theory_exponent, angle, None,
                               history, spacing)
    status = CONVERGED if change <= tolerance else NOT_CONVERGED
    return PeakCertificate(status, value, change, slope, theory_exponent, angle, None, history, spacing)
