"""Geometry sources: the safety screen of gmsh scripts, run before gmsh sees them.

A ``.geo`` script is a program. Unless the user trusts the script (``--trust-script``), the screen
refuses every construct of gmsh 4.15's script language that runs a program, reads or writes a file
other than a screened script, defines or calls code, waits, or could hide such a construct from
the screen; ``Exit``, ``Abort`` and ``General.AbortOnError`` end the process and are refused even
then. ``REFUSALS`` is the one list of them: the screen uses it, and the README lists it (a test
compares the README with ``refusals_markdown()``).

The screen reads a script as gmsh's lexer does (``src/parser/Gmsh.l``): a string runs from a quote
to the next same quote (``"`` or ``'``; no escapes; line breaks allowed); ``/* */`` and ``//`` are
comments; a word is ``[A-Za-z_][A-Za-z0-9_]*``. gmsh's keywords and command names are
case-sensitive (``system "x";`` is an unknown command to gmsh 4.15); the screen matches them in
any letter case all the same. Two places where gmsh re-reads a script differently are refused too:
when it skips a block (a false ``If`` branch, an empty ``For``) its character scanner drops the
character after a word-initial ``E``, ``F`` or ``I`` and up to four after ``If``/``For``; and each
pass of a ``For`` loop restarts at the line after the loop's header. A quote or comment opener
dropped there, or a string or comment running past a ``For`` header's line, would let gmsh read as
commands what the screen took for text.
"""

from __future__ import annotations

import re
import string
from dataclasses import dataclass
from pathlib import Path
from typing import NamedTuple

from .errors import GeometryError

RUNS_PROGRAMS = "runs programs"
READS_FILES = "reads files"
WRITES_FILES = "writes files"
DEFINES_CODE = "defines or calls code"
ENDS_PROCESS = "ends the process"
WAITS = "loops and time"
HIDES_CODE = "could hide code from the screen"
GROUPS = (RUNS_PROGRAMS, READS_FILES, WRITES_FILES, DEFINES_CODE, ENDS_PROCESS, WAITS, HIDES_CODE)

_TRUST = "or, if you wrote and trust this script, run again with --trust-script"


@dataclass(frozen=True)
class Refusal:
    """One refused construct. Exactly one of ``words``, ``option``, ``check`` says how it is found."""

    name: str  # as the README lists it
    group: str  # one of GROUPS
    reason: str  # completes "'<what the script says>' ..."
    words: str | None = None  # regex matching a whole word of the script, in any letter case
    option: str | None = None  # regex matching a whole option name 'Category.Name' (index dropped), any case
    check: str | None = None  # key of a dedicated check in this module
    not_before: tuple[str, ...] = ()  # the word is allowed before these tokens (``Print.`` options)
    always: bool = False  # refused even with --trust-script
    fix: str = "remove it"

    def message(self, script: Path, line: int, construct: str) -> str:
        fix = self.fix if self.always else f"{self.fix}, {_TRUST}"
        return (f"geometry script {script.name}, line {line}: '{construct}' {self.reason}; refused. "
                f"{fix[0].upper()}{fix[1:]}")


_NOT_SCRIPT = ("reads a file that is not a geometry script (CAD, mesh or view import; gmsh reads unknown types "
               "as scripts)")
_FORMAT = "with a format that is not a literal text with only %g and %e numbers"

REFUSALS: tuple[Refusal, ...] = (
    Refusal("`System`, `SystemCall`, `NonBlockingSystemCall`", RUNS_PROGRAMS, "runs a shell command",
            words=r"System|SystemCall|NonBlockingSystemCall"),
    Refusal("`OnelabRun`", RUNS_PROGRAMS, "runs another program (a ONELAB client)", words="OnelabRun"),
    Refusal("`SendToServer`", RUNS_PROGRAMS, "sends data to another program", words="SendToServer"),
    Refusal("the `ExternalProcess` mesh-size field", RUNS_PROGRAMS, "is a mesh-size field that runs a program",
            words="ExternalProcess"),
    Refusal("`Solver.*` options", RUNS_PROGRAMS, "sets how gmsh launches solver programs", option=r"Solver\..*"),
    Refusal("options naming a command (`*Command*`, `*Editor*`, `*Executable*`, `*RemoteLogin*`)", RUNS_PROGRAMS,
            "names a command or program that gmsh runs",
            option=r"[^.]+\.\w*(?:Command|Editor|Executable|RemoteLogin)\w*"),
    Refusal("`Merge` of anything but a `.geo` script", READS_FILES, _NOT_SCRIPT, check="merge"),
    Refusal("`ShapeFromFile`", READS_FILES, "imports a CAD file", words="ShapeFromFile"),
    Refusal("`ListFromFile`", READS_FILES, "reads numbers from a file", words="ListFromFile"),
    Refusal("`FileExists`", READS_FILES, "probes the file system", words="FileExists"),
    Refusal("`GetEnv`", READS_FILES, "reads the environment", words="GetEnv"),
    Refusal("the `Structured` mesh-size field", READS_FILES, "is a mesh-size field read from a file",
            words="Structured"),
    Refusal("`Save`", WRITES_FILES, "writes files", words="Save"),
    Refusal("`Print` (the `Print.*` options are allowed)", WRITES_FILES, "writes files", words="Print",
            not_before=(".",)),
    Refusal("`CreateDir`", WRITES_FILES, "writes files", words="CreateDir"),
    Refusal("`Printf(...) >` and `>>`", WRITES_FILES, "writes a file", check="printf_to_file",
            fix="remove the redirection"),
    Refusal("`Plugin`", WRITES_FILES, "runs a post-processing plugin (some write files)", words="Plugin"),
    Refusal("options naming a file (`*File*`, e.g. `General.LogFileName`)", WRITES_FILES,
            "names a file that gmsh reads or writes", option=r"[^.]+\.\w*File\w*"),
    Refusal("`Macro`, `Function`", DEFINES_CODE, "defines a routine, which Call may run by a computed name",
            words="Macro|Function"),
    Refusal("`Call`, `Return`", DEFINES_CODE, "runs a routine (by a name computed at run time, or recursively)",
            words="Call|Return"),
    Refusal("`S2N`, `StringToName`", DEFINES_CODE, "turns a string into a command or variable name",
            words="S2N|StringToName"),
    Refusal("`Include` or `Merge` of a file not named literally", DEFINES_CODE, "must name its file literally",
            check="literal_file",
            fix='name the file literally (e.g. Include "part.geo";) so that it can be checked too'),
    Refusal("`GmshOption`", DEFINES_CODE, "binds a parameter to any gmsh option", words="GmshOption"),
    Refusal(f"`Printf`, `Sprintf`, `Error`, `Warning` {_FORMAT}", DEFINES_CODE,
            "hands its text to C's printf unchecked (gmsh can crash or overwrite memory)", check="format",
            fix="use a literal text whose numbers are %g or %e with at most two-digit widths"),
    Refusal("number-format options (`General.NumberFormat`, `*.AxesFormat*`, `View.Format`)", DEFINES_CODE,
            "is a C printf format that gmsh uses unchecked",
            option=r"(?:General|View)\.(?:NumberFormat|Format|AxesFormat\w*)"),
    Refusal("`Exit`, `Abort`", ENDS_PROCESS, "would end the program", words="Exit|Abort", always=True,
            fix="remove it from the script"),
    Refusal("`General.AbortOnError`", ENDS_PROCESS, "can make gmsh end the program on an error",
            option=r"General\.AbortOnError", always=True, fix="remove it from the script"),
    Refusal("`Sleep`", WAITS, "pauses gmsh", words="Sleep"),
    Refusal("`GetValue`, `GetStringValue`", WAITS, "waits for keyboard input", words="GetValue|GetStringValue"),
    Refusal("a string of more than 1000 characters", HIDES_CODE,
            "is longer than gmsh's strings of 1023 characters (it would read the rest as commands)",
            check="long_string", fix="split it (StrCat) or shorten it"),
    Refusal("a NUL character", HIDES_CODE,
            "ends a string or comment early in gmsh (it would read the rest as commands)", check="nul"),
    Refusal("a quote or comment right after a word starting with `E`, `F` or `I` (or within four after `If`, `For`)",
            HIDES_CODE,
            "has a quote or comment opener that gmsh drops when it skips an If or For block (it would read the text "
            "as commands)", check="skip", fix="put a space or a line break before the quote or comment"),
    Refusal("a string or comment running past the line of a `For` header (or a header line over 4000 characters)",
            HIDES_CODE,
            "has a string or comment running past its line, or a line over 4000 characters; gmsh restarts each pass "
            "of the loop at the next line (it would read the text as commands)",
            check="for_restart", fix="end the string or comment on the For line, or start it on the next one"),
)

#: option categories of gmsh (and ``Field[i].Name`` field options)
OPTION_CATEGORIES = ("General", "Geometry", "Mesh", "Solver", "PostProcessing", "Print", "View", "Field")
LONGEST_STRING = 1000
LONGEST_LINE = 4000  # of a For header's line
_ALPHA = frozenset(string.ascii_letters + "_")  # gmsh's is_alpha(): digits are not alpha

_LEXEME = re.compile(
    r"""(?P<space>[ \t\n\r\f]+)
      | (?P<comment>/\*.*?(?:\*/|\Z)|//[^\n]*)
      | (?P<string>"[^"]*(?:"|\Z)|'[^']*(?:'|\Z))
      | (?P<number>[0-9]+\.[0-9]*(?:[Ee][-+]?[0-9]+)?|[0-9]*\.[0-9]+(?:[Ee][-+]?[0-9]+)?|[0-9]+[Ee][-+]?[0-9]+|[0-9]+)
      | (?P<word>[A-Za-z_][A-Za-z0-9_]*)
      | (?P<punct>\.\.\.|::|\|\||&&|\+\+|--|==|!=|<=|>=|>>|<<|[-+*/]=|.)""",
    re.S | re.X,
)
_SAFE_CONVERSION = re.compile(r"%%|%[-+ #0]*[0-9]{0,2}(?:\.[0-9]{0,2})?[eEgG]")
_DEFINE_CONSTANT = re.compile(r"\bDefineConstant\s*\[(.*?)\]\s*;", re.S)
_CATEGORIES = frozenset(category.lower() for category in OPTION_CATEGORIES)
_BY_CHECK = {rule.check: rule for rule in REFUSALS if rule.check}
_WORD_RULES = [(re.compile(rule.words, re.I), rule) for rule in REFUSALS if rule.words]
_OPTION_RULES = [(re.compile(rule.option, re.I), rule) for rule in REFUSALS if rule.option]


class _Token(NamedTuple):
    kind: str  # word, number, string, comment, punct
    text: str  # a string's text without its quotes
    start: int
    end: int


class _Script(NamedTuple):
    text: str
    tokens: list[_Token]  # without comments
    openers: frozenset[int]  # where a string or comment starts
    inside: bytearray  # 1 inside a string or comment (after its first character)


def _lex(text: str) -> _Script:
    tokens: list[_Token] = []
    openers: set[int] = set()
    inside = bytearray(len(text))
    pos = 0
    while pos < len(text):
        lexeme = _LEXEME.match(text, pos)
        kind, start, pos, raw = lexeme.lastgroup, lexeme.start(), lexeme.end(), lexeme.group()
        if kind in ("string", "comment"):
            openers.add(start)
            inside[start + 1 : pos] = b"\x01" * (pos - start - 1)
        if kind == "string":
            closed = len(raw) > 1 and raw[-1] == raw[0]
            tokens.append(_Token(kind, raw[1:-1] if closed else raw[1:], start, pos))
        elif kind not in ("space", "comment"):
            tokens.append(_Token(kind, raw, start, pos))
    return _Script(text, tokens, frozenset(openers), inside)


def _shown(text: str) -> str:
    """``text`` on one short line, for a message."""
    text = " ".join(text.split())
    return text if len(text) <= 40 else text[:37] + "..."


def _closing(tokens: list[_Token], i: int) -> int | None:
    """Index of the bracket closing the one at ``tokens[i]``."""
    depth = 0
    for j in range(i, len(tokens)):
        bracket = _text_of(tokens, j)
        if bracket in ("(", "[", "{"):
            depth += 1
        elif bracket in (")", "]", "}"):
            depth -= 1
            if depth == 0:
                return j
    return None


def _text_of(tokens: list[_Token], i: int) -> str:
    return tokens[i].text if 0 <= i < len(tokens) and tokens[i].kind == "punct" else ""


Finding = tuple[int, str, Refusal]  # (position, construct as written, rule)


def _word_findings(script: _Script) -> list[Finding]:
    found: list[Finding] = []
    tokens = script.tokens
    for i, token in enumerate(tokens):
        if token.kind != "word":
            continue
        for pattern, rule in _WORD_RULES:
            if pattern.fullmatch(token.text) and _text_of(tokens, i + 1) not in rule.not_before:
                found.append((token.start, token.text, rule))
        if token.text.lower() not in _CATEGORIES:
            continue
        j = i + 1
        if _text_of(tokens, j) == "[":
            j = (_closing(tokens, j) or len(tokens)) + 1
        if _text_of(tokens, j) == "." and j + 1 < len(tokens) and tokens[j + 1].kind == "word":
            name = f"{token.text}.{tokens[j + 1].text}"
            for pattern, rule in _OPTION_RULES:
                if pattern.fullmatch(name):
                    found.append((token.start, name, rule))
    return found


def _call_findings(script: _Script, folder: Path, trusted: bool) -> tuple[list[Finding], list[Path]]:
    """Printf redirections, unsafe formats, and Include/Merge: the findings, and the scripts to screen next."""
    found: list[Finding] = []
    scripts: list[Path] = []
    tokens = script.tokens
    for i, token in enumerate(tokens):
        word = token.text.lower() if token.kind == "word" else ""
        if word in ("printf", "sprintf", "error", "warning") and _text_of(tokens, i + 1) == "(":
            close = _closing(tokens, i + 1)
            if word == "printf" and close is not None and _text_of(tokens, close + 1) in (">", ">>"):
                found.append((token.start, f"{token.text}(...) {tokens[close + 1].text}", _BY_CHECK["printf_to_file"]))
            first = tokens[i + 2] if i + 2 < len(tokens) else None
            if first is None or first.kind != "string" or _text_of(tokens, i + 3) not in (",", ")") \
                    or not _safe_format(first.text):
                found.append((token.start, token.text, _BY_CHECK["format"]))
        elif word in ("include", "merge", "mergewithboundingbox"):
            name = tokens[i + 1] if i + 1 < len(tokens) else None
            if name is None or name.kind != "string" or _text_of(tokens, i + 2) != ";":
                if not trusted:
                    found.append((token.start, token.text, _BY_CHECK["literal_file"]))
            elif word == "include" or Path(name.text).suffix.lower() == ".geo":
                scripts.append(folder / name.text)
            elif not trusted:
                found.append((token.start, f'{token.text} "{name.text}"', _BY_CHECK["merge"]))
    return found, scripts


def _safe_format(text: str) -> bool:
    """A literal format that gmsh can give to C's sprintf (256-character buffers) and printf without harm."""
    pos = text.find("%")
    while pos >= 0:
        conversion = _SAFE_CONVERSION.match(text, pos)
        if conversion is None:
            return False
        pos = text.find("%", conversion.end())
    return all(len(piece) <= 100 for piece in text.split("%")[1:])


def _skip_hazard(script: _Script) -> tuple[int, int] | None:
    """First quote or comment opener that gmsh's block-skipping scanner (skip()/skipTest() in Gmsh.l) can drop.

    The scanner looks for EndIf/ElseIf/Else/If (a false If branch) or EndFor/For (an empty loop) at a
    character E, F or I that follows a non-letter. When the word is not one that ends the skip it drops
    the next character; after a nested If or For it drops the next up to four without reading them.
    It then goes on from where it stopped, taking the next character for a word start again.
    Returns the word's start and the opener's position.
    """
    text, inside, openers = script.text, script.inside, script.openers
    n = len(text)
    work = [p for p in range(n) if text[p] in "EFI" and not inside[p] and (p == 0 or text[p - 1] not in _ALPHA)]
    seen: set[int] = set()
    hazards: list[tuple[int, int]] = []
    while work:
        p = work.pop()
        if p in seen or p >= n or inside[p] or text[p] not in "EFI":
            continue
        seen.add(p)
        dropped, resume = [p + 1], [p + 2]
        for word, first_dropped in (("If", p + 2), ("For", p + 3)):
            end = p + len(word)
            if text.startswith(word, p) and (end >= n or text[end] not in _ALPHA):
                dropped += range(first_dropped, p + 6)
                resume += [p + 5, p + 6]
        hazards += [(p, q) for q in dropped if q in openers]
        work += resume
    return min(hazards, key=lambda hazard: hazard[1], default=None)


def _for_restart_hazard(script: _Script) -> tuple[int, int] | None:
    """A For loop whose next pass would restart inside a string or comment (gmsh's fsetpos to the line
    after its header): the loop's start and the end of its header."""
    tokens, text = script.tokens, script.text
    for i, token in enumerate(tokens):
        if token.kind != "word" or token.text != "For":
            continue
        j = next((k for k in range(i + 1, min(i + 4, len(tokens))) if _text_of(tokens, k) in ("(", "{")), None)
        close = _closing(tokens, j) if j is not None else None
        if close is None:
            continue
        breaks = [k for k in (text.find("\n", tokens[close].start), text.find("\r", tokens[close].start)) if k >= 0]
        restart = min(breaks, default=len(text)) + 1
        line_start = max(text.rfind("\n", 0, tokens[close].start), text.rfind("\r", 0, tokens[close].start)) + 1
        # gmsh reads a line at a time, but a line longer than its buffer (16 kB) in pieces
        if restart < len(text) and script.inside[restart] or restart - line_start > LONGEST_LINE:
            return token.start, tokens[close].end
    return None


def _line_of(text: str, index: int) -> int:
    return text.count("\n", 0, index) + 1


def screen_script(path: Path, trusted: bool, _seen: frozenset[Path] = frozenset()) -> set[str]:
    """Refuse unsafe constructs in ``path`` and every script it includes or merges (see ``REFUSALS``).

    Returns the names declared with ``DefineConstant`` (the settable parameters).
    """
    path = Path(path).resolve()
    if path in _seen:
        raise GeometryError(f"geometry script {path.name} includes itself (directly or via another file)")
    if not path.is_file():
        raise GeometryError(f"geometry script {str(path)!r} not found; check the path")
    try:
        text = path.read_bytes().decode("utf-8")  # no newline translation: gmsh counts '\n' only
    except UnicodeDecodeError:
        raise GeometryError(f"geometry script {path.name} is not UTF-8 text") from None
    script = _lex(text)
    found = _word_findings(script)
    calls, includes = _call_findings(script, path.parent, trusted)
    found += calls
    if not trusted:
        if "\0" in text:
            found.append((text.index("\0"), "NUL", _BY_CHECK["nul"]))
        found += [(t.start, _shown(t.text[:20]) + "...", _BY_CHECK["long_string"]) for t in script.tokens
                  if t.kind == "string" and len(t.text) > LONGEST_STRING]
        skipped = _skip_hazard(script)
        if skipped is not None:
            word, opener = skipped
            found.append((opener, _shown(text[word : opener + 2]), _BY_CHECK["skip"]))
        restart = _for_restart_hazard(script)
        if restart is not None:
            found.append((restart[0], _shown(text[restart[0] : restart[1]]), _BY_CHECK["for_restart"]))
    found = [f for f in found if f[2].always or not trusted]
    if found:
        position, construct, rule = min(found, key=lambda f: f[0])
        raise GeometryError(rule.message(path, _line_of(text, position), construct))
    blank = script.inside
    code = "".join(c if c in "\n\r" or not (blank[k] or k in script.openers) else " " for k, c in enumerate(text))
    declared: set[str] = set()
    for block in _DEFINE_CONSTANT.finditer(code):
        declared.update(re.findall(r"([A-Za-z_]\w*)\s*=", block.group(1)))
    for include in includes:
        declared |= screen_script(include, trusted, _seen | {path})
    return declared


def refusals_markdown() -> str:
    """The README's list of refused constructs, one line per group."""
    lines = []
    for group in GROUPS:
        names = [rule.name for rule in REFUSALS if rule.group == group]
        always = " (refused even with `--trust-script`)" if all(r.always for r in REFUSALS if r.group == group) else ""
        lines.append(f"- {group}{always}: " + "; ".join(names) + ".")
    return "\n".join(lines)
