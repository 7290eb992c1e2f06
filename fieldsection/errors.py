"""Exception hierarchy.

Every error carries a one-line message that names the culprit and says how to fix it.
The CLI prints the message and exits non-zero; library code never prints or exits.
"""


class FieldSectionError(Exception):
    """Base class of every error raised on bad input or a failed stage."""


class CaseFileError(FieldSectionError):
    """The case file is missing, unreadable or inconsistent."""


class UnitError(CaseFileError):
    """A value carries the wrong unit or cannot be parsed."""


class MaterialError(FieldSectionError):
    """A material is unknown or has non-physical properties."""


class GeometryError(FieldSectionError):
    """The geometry script is missing, broken, unsafe or lacks a named group."""


class MeshError(FieldSectionError):
    """The mesh is empty, inconsistent, or its tags do not match the case."""


class SolverError(FieldSectionError):
    """The linear solve failed or produced a non-finite result."""


class ReportError(FieldSectionError):
    """The report could not be written."""


class ReportFolderTaken(FieldSectionError):
    """The report's folder holds another kind of report (a case, a study or the verification suite of the same
    name): the user's choice of names or folders, so bad input, not a disk fault."""
