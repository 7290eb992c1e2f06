"""Geometry sources: safety screening of gmsh scripts before gmsh sees them.

A ``.geo`` script is a program: gmsh's ``System`` family runs shell commands, and ``Save``,
``Print``, ``Printf(...) > file``, ``CreateDir`` and plugins write files. They are refused unless
the user explicitly trusts the script. ``Include`` and ``Merge`` must name their file literally,
so that an included script is screened too. ``Exit``/``Abort`` would end our own process and are
always refused.
"""

from __future__ import annotations

import re
from pathlib import Path

from .errors import GeometryError

SHELL_COMMANDS = ("System", "SystemCall", "NonBlockingSystemCall", "OnelabRun")
FILE_WRITING_COMMANDS = ("Save", "Print", "CreateDir", "Plugin", "Delete Model", "SendToServer")
PROCESS_ENDING_COMMANDS = ("Exit", "Abort")

_TOKENS = re.compile(r'"(?:[^"\\\n]|\\.)*"|//[^\n]*|/\*.*?\*/', re.S)
_INCLUDE = re.compile(r'\b(?:Include|Merge)\s*"([^"]+)"\s*;')
_ANY_INCLUDE = re.compile(r"\b(Include|Merge)\b")
_PRINTF_TO_FILE = re.compile(r"\bPrintf\s*\((?:[^()]|\([^()]*\))*\)\s*>")
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
        risky = [(word, "runs a shell command") for word in SHELL_COMMANDS]
        risky += [(word, "writes files") for word in FILE_WRITING_COMMANDS]
        for word, what in risky:
            found = re.search(r"\b" + word.replace(" ", r"\s+") + r"\b", code_only)
            if found:
                raise GeometryError(
                    f"geometry script {path.name}, line {_line_of(code_only, found.start())}: '{word}' {what}; "
                    "refused. Remove it, or if you wrote and trust this script run again with --trust-script"
                )
        found = _PRINTF_TO_FILE.search(with_strings)
        if found:
            raise GeometryError(
                f"geometry script {path.name}, line {_line_of(with_strings, found.start())}: 'Printf(...) >' writes "
                "a file; refused. Remove the redirection, or run again with --trust-script"
            )
    literal = {m.start() for m in _INCLUDE.finditer(with_strings)}
    for found in _ANY_INCLUDE.finditer(code_only):
        if found.start() not in literal:
            raise GeometryError(
                f"geometry script {path.name}, line {_line_of(code_only, found.start())}: '{found.group(1)}' must "
                f'name its file literally (e.g. {found.group(1)} "part.geo";) so that the file can be checked too'
            )
    declared: set[str] = set()
    for block in _DEFINE_CONSTANT.finditer(code_only):
        declared.update(re.findall(r"([A-Za-z_]\w*)\s*=", block.group(1)))
    for include in _INCLUDE.finditer(with_strings):
        target = path.parent / include.group(1)
        if include.group(0).startswith("Include") or target.suffix.lower() == ".geo":
            declared |= screen_script(target, trusted, _seen | {path})
    return declared
