"""VTK export: the mesh and its fields as a VTK unstructured grid (legacy binary format), for ParaView
and the like.

Written with meshio. The legacy binary format stores raw arrays; the XML format (.vtu) base64-encodes
them and took about 8x as long to write at a million elements. Everything is in SI units:

- points: the mesh's corner vertices (x, y, 0), m; cells: ``triangle`` (corner vertices only; the
  mid-edge nodes of a curved mesh are not written, so arcs appear as chords);
- point data ``V``: potential at the vertices, V;
- cell data, one value per element:
  ``E`` (V/m), ``D`` and ``P`` (C/m^2): centroid values (mean of the vertex values), 3 components
  with z = 0; ``E_magnitude_peak`` (V/m): largest |E| at the element's vertices;
  ``utilisation``: E_magnitude_peak / dielectric strength, written as -1 where it is unknown
  (no strength given for the material, or a conductor region), since VTK colour maps handle a
  negative sentinel better than NaN; ``region_id``: index into ``SectionMesh.region_names``;
  ``relative_permittivity`` (1 in conductor regions).
"""

from __future__ import annotations

import os
from pathlib import Path

import meshio
import numpy as np

from .errors import ReportError
from .fields import ElementFields
from .hotspots import HotspotResult
from .problem import AssembledProblem
from .solve import Solution

#: value written for ``utilisation`` where no dielectric strength applies
UNKNOWN_UTILISATION = -1.0


def _centroid_xyz(vertex_values: np.ndarray, constant: bool) -> np.ndarray:
    """(nelements, 3, 2) vertex values -> (nelements, 3) centroid values with z = 0; ``constant``: one value
    per element (``ElementFields.constant_in_elements``), so no mean to take."""
    mean = vertex_values[:, 0] if constant else vertex_values.mean(axis=1)
    out = np.zeros((len(mean), 3))  # C order, as written (column_stack of these views gave Fortran order: a copy)
    out[:, :2] = mean
    return out


def section_to_meshio(problem: AssembledProblem, solution: Solution, fields: ElementFields,
                      hotspots: HotspotResult) -> meshio.Mesh:
    """The section and its fields as a :class:`meshio.Mesh` (see the module docstring)."""
    mesh = problem.section.mesh
    n_vertices, n_elements = mesh.nvertices, mesh.nelements
    if solution.potential.shape != (problem.ndofs,):
        raise ValueError(f"the solution has {solution.potential.size} DOFs, the problem {problem.ndofs}; "
                         "pass the solution of this problem")
    if fields.E.shape != (n_elements, 3, 2) or hotspots.utilisation.shape != (n_elements,):
        raise ValueError("the fields or hotspots were computed on another mesh; pass those of this problem")

    points = np.zeros((n_vertices, 3))
    points[:, :2] = mesh.p[:, :n_vertices].T  # MeshTri2's p also holds the mid-edge nodes
    utilisation = np.where(np.isfinite(hotspots.utilisation), hotspots.utilisation, UNKNOWN_UTILISATION)
    cell_data = {
        "E": _centroid_xyz(fields.E, fields.constant_in_elements),
        "D": _centroid_xyz(fields.D, fields.constant_in_elements),
        "P": _centroid_xyz(fields.P, fields.constant_in_elements),
        "E_magnitude_peak": fields.element_peak_E.astype(np.float64),
        "utilisation": utilisation.astype(np.float64),
        "region_id": problem.section.region_of_element.astype(np.int32),
        "relative_permittivity": problem.relative_permittivity.astype(np.float64),
    }
    drawn = ~problem.section.exterior  # the mapped exterior of an open-space circle is not physical space
    return meshio.Mesh(
        points,
        [("triangle", np.ascontiguousarray((mesh.t if drawn.all() else mesh.t[:, drawn]).T, dtype=np.int64))],
        point_data={"V": np.ascontiguousarray(solution.potential[:n_vertices], dtype=np.float64)},
        cell_data={name: [np.ascontiguousarray(values if drawn.all() else values[drawn])]
                   for name, values in cell_data.items()},
    )


def write_vtk(problem: AssembledProblem, solution: Solution, fields: ElementFields, hotspots: HotspotResult,
              path: str | os.PathLike) -> Path:
    """Write the section and its fields to ``path`` as a binary legacy ``.vtk`` file; return the path."""
    return write_legacy_vtk(section_to_meshio(problem, solution, fields, hotspots), path)


def write_legacy_vtk(grid: meshio.Mesh, path: str | os.PathLike) -> Path:
    """Write ``grid`` as a binary legacy ``.vtk`` file; return the path."""
    path = Path(path)
    try:
        # version 4.2 of the legacy format: read by older ParaView and VisIt too (5.1 needs VTK 9)
        meshio.vtk.write(path, grid, binary=True, fmt_version="4.2")
    except OSError as exc:
        raise ReportError(f"cannot write the VTK file {str(path)!r}: {exc.strerror or exc}; "
                          "check that its folder exists and is writable") from None
    return path
