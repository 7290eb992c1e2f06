"""Geometry sources: safety screening of gmsh scripts before gmsh sees them.

A ``.geo`` script is a program: gmsh's ``System`` family runs shell commands. They are refused
unless the user explicitly trusts the script; ``Exit``/``Abort`` would end our own process and
are always refused.
"""

from __future__ import annotations

import re
from pathlib import Path

from .errors import GeometryError

SHELL_COMMANDS = ("System", "SystemCall", "NonBlockingSystemCall", "OnelabRun")
PROCESS_ENDING_COMMANDS = ("Exit", "Abort")

_TOKENS = re.compile(r'"(?:[^"\\\n]|\\.)*"|//[^\n]*|/\*.*?\*/', re.S)
_INCLUDE = re.compile(r'\bInclude\s*"([^"]+)"')
_DEFINE_CONSTANT = re.compile(r"\bDefineConstant\s*\[(.*?)\]\s*;", re.S)


def _blank(match: re.Match[str], keep_strings: bool) -> str:
    text = match.group(0)
    if keep_strings and text.startswith('"'):
        return text
    return re.sub(r"[^\n]", " ", text)  # keep line numbers


def _line_of(text: str, index: int) -> int:
    return text.count("\n", 0, index) + 1


def screen_script(path: Path, trusted: bool, _seen: frozenset[Path] = frozenset()) -> set[str]:
    """Refuse unsafe commands in ``path`` and every script it includes.

    Returns the names declared with ``DefineConstant`` (the settable parameters).
    """
    path = Path(path).resolve()
    if path in _seen:
        raise GeometryError(f"geometry script {path.name} includes itself (directly or via another file)")
    if not path.is_file():
        raise GeometryError(f"geometry script {str(path)!r} not found; check the path")
    try:
        raw = path.read_text(encoding="utf-8")
    except UnicodeDecodeError:
        raise GeometryError(f"geometry script {path.name} is not UTF-8 text") from None
    with_strings = _TOKENS.sub(lambda m: _blank(m, keep_strings=True), raw)
    code_only = _TOKENS.sub(lambda m: _blank(m, keep_strings=False), raw)

    for word in PROCESS_ENDING_COMMANDS:
        found = re.search(rf"\b{word}\b", code_only)
        if found:
            raise GeometryError(
                f"geometry script {path.name}, line {_line_of(code_only, found.start())}: '{word}' would end "
                "the program; remove it from the script"
            )
    if not trusted:
        for word in SHELL_COMMANDS:
            found = re.search(rf"\b{word}\b", code_only)
            if found:
                raise GeometryError(
                    f"geometry script {path.name}, line {_line_of(code_only, found.start())}: '{word}' runs a "
                    "shell command; refused. Remove it, or if you wrote and trust this script run again with "
                    "--trust-script"
                )
    declared: set[str] = set()
    for block in _DEFINE_CONSTANT.finditer(code_only):
        declared.update(re.findall(r"([A-Za-z_]\w*)\s*=", block.group(1)))
    for include in _INCLUDE.finditer(with_strings):
        declared |= screen_script(path.parent / include.group(1), trusted, _seen | {path})
    return declared
