"""fieldsection: electric field, capacitance, hotspots and bound charge of 2D insulation cross-sections."""

__version__ = "0.1.0"

from .case import BuilderGeometry, Case, MeshSettings, ScriptGeometry, load_case  # noqa: E402
from .errors import FieldSectionError  # noqa: E402
from .materials import Material, lookup_material  # noqa: E402
from .pipeline import SectionResult, analyse  # noqa: E402

__all__ = [
    "BuilderGeometry",
    "Case",
    "FieldSectionError",
    "Material",
    "MeshSettings",
    "ScriptGeometry",
    "SectionResult",
    "analyse",
    "load_case",
    "lookup_material",
]
