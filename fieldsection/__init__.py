"""fieldsection: electric field, capacitance, hotspots and bound charge of 2D insulation cross-sections."""

__version__ = "0.1.0"

from .analysis import AnalysisSettings, TemperatureProfile  # noqa: E402
from .case import SINGLE_MESH, BuilderGeometry, Case, MeshSettings, Refinement, ScriptGeometry, load_case  # noqa: E402
from .errors import FieldSectionError  # noqa: E402
from .materials import Material, lookup_material  # noqa: E402
from .pipeline import SectionResult, analyse  # noqa: E402

__all__ = [
    "AnalysisSettings",
    "BuilderGeometry",
    "Case",
    "FieldSectionError",
    "Material",
    "MeshSettings",
    "Refinement",
    "SINGLE_MESH",
    "ScriptGeometry",
    "SectionResult",
    "TemperatureProfile",
    "analyse",
    "load_case",
    "lookup_material",
]
