"""What a netlist and the model files it includes may contain, so that no command can run.

ngspice runs commands from a netlist in more ways than a list of spellings can cover
(measured with ngspice 39, docs/reliability.md): ``.control`` / ``.exec`` blocks matched by
prefix and in any case (``.CONTROLxyz`` opens one), comment lines starting ``*#`` (even after
leading blanks), shell command substitution in backquotes inside control lines, ``source`` of a
file named by a variable or after ``cd``, and control blocks of included files. pashape writes no
control block into a netlist (it sends every simulator command itself), so the rule here is an
allow-list, checked on every physical line as ngspice reads it:

* a netlist holds comments (``*`` not followed by ``#``), element cards whose name is a plain
  SPICE name, continuation lines and the dot cards of :data:`NETLIST_DOT_CARDS`;
* a model file (``.include``) holds only comments, element cards, continuations and
  :data:`MODEL_DOT_CARDS` (``.model``, ``.subckt``, ``.ends``, ``.param``): no nested include;
* no backquote and no control character outside comments, anywhere;
* an included file is named by an absolute path, is a non-empty regular file of at most
  :data:`MAX_MODEL_BYTES`, and (when ``roots`` are given) lies inside one of them after every
  symbolic link is resolved.

Every refusal is one sentence naming the file and line. The checks read text only; they are
used by the renderer (design folder known) and again by the simulator before each run.
"""

from __future__ import annotations

import os
import re
import stat
from pathlib import Path

__all__ = [
    "MAX_MODEL_BYTES",
    "MODEL_DOT_CARDS",
    "NETLIST_DOT_CARDS",
    "check_model_file",
    "check_netlist_text",
]

#: dot cards a netlist may hold (analyses, options, models, includes, output selection)
NETLIST_DOT_CARDS = frozenset({
    ".title", ".tran", ".ac", ".op", ".dc", ".noise", ".tf", ".sens", ".pz", ".disto", ".four",
    ".options", ".option", ".opt", ".param", ".func", ".model", ".subckt", ".ends", ".global",
    ".include", ".inc", ".save", ".ic", ".nodeset", ".temp", ".csparam", ".meas", ".measure",
    ".print", ".probe", ".width", ".end",
})
#: dot cards a model file may hold
MODEL_DOT_CARDS = frozenset({".model", ".subckt", ".ends", ".param"})
#: largest model file read, bytes (vendor libraries are a few MB)
MAX_MODEL_BYTES = 20_000_000
#: a control line as ngspice recognises it: prefix match, any case, after blanks or a '+'
_CONTROL = re.compile(r"^[+\s]*(\.control|\.exec|\.endc|\*#)", re.IGNORECASE)
#: an element name: a letter, then letters, digits and the punctuation SPICE names use
_ELEMENT = re.compile(r"^[A-Za-z][A-Za-z0-9_.\[\]<>!@#%&\-+]*$")
_INCLUDE_CARDS = (".include", ".inc")


def _lines(text: str) -> list[str]:
    """Physical lines: Python's splitlines breaks at every character ngspice breaks at, and more."""
    return text.splitlines()


def _bad_char(line: str) -> str | None:
    if line.isprintable() or line.replace("\t", "").isprintable():  # the common case, at C speed
        return None
    for ch in line:
        if ch != "\t" and not ch.isprintable():
            return f"U+{ord(ch):04X}"
    return None


def _first_word(body: str) -> str:
    """The card keyword: up to the first blank, quote, parenthesis, '=' or comma."""
    return re.split(r"[\s'\"(=,]", body, maxsplit=1)[0]


def _include_target(rest: str) -> str:
    rest = rest.strip()
    if rest[:1] in ("'", '"'):
        end = rest.find(rest[0], 1)
        return rest[1:end] if end > 0 else rest[1:]
    return rest.split()[0] if rest.split() else ""


def _scan(text: str, where: str, error, *, model: bool, title: bool) -> list[tuple[int, str]]:
    """Check ``text`` card by card; return the include targets as (line number, path)."""
    allowed = MODEL_DOT_CARDS if model else NETLIST_DOT_CARDS
    what = "a model file" if model else "a netlist"
    targets: list[tuple[int, str]] = []
    for number, line in enumerate(_lines(text), start=1):
        control = _CONTROL.match(line)
        if control:
            word = control.group(1)
            raise error(f"{where} line {number}: '{word[:12]}' starts an ngspice control command, which could run "
                        f"shell commands; pashape sends every simulator command itself, so remove the line.")
        body = line.strip()
        if not body or body[0] == "*":
            continue  # a comment (a '*#' one was refused above)
        bad = _bad_char(line)
        if bad:
            raise error(f"{where} line {number}: the character {bad} is not allowed in {what}; save it as plain text.")
        if "`" in body:
            raise error(f"{where} line {number}: a backquote is not allowed in {what} (ngspice runs backquoted text "
                        "as a shell command in control lines); remove it.")
        if title and number == 1:
            continue  # the title line: ngspice does not parse it
        if body[0] == "+":
            continue  # a continuation of the previous card
        first = _first_word(body)
        if body[0] == ".":
            word = first.lower()
            at = f"{where} line {number}"
            if word in _INCLUDE_CARDS and not model:
                target = _include_target(body[len(word):])
                if not target:
                    raise error(f"{at}: '{word}' names no file; give the model file's path.")
                targets.append((number, target))
                continue
            if word in (".include", ".inc", ".lib") and model:
                raise error(f"{at}: a model file may not include other files ('{word}'); copy their "
                            "models into it.")
            if word not in allowed:
                hint = ("only .model, .subckt, .ends, .param and element cards" if model
                        else "only analyses, options, models, subcircuits and .include")
                raise error(f"{at}: '{word[:20]}' is not allowed in {what} ({hint}); remove it.")
            continue
        if not _ELEMENT.match(first):
            raise error(f"{where} line {number}: '{first[:20]}' is neither an element card nor a dot card, so this "
                        f"is not {what}; check the file.")
    return targets


def check_model_file(target: str, where: str, error, roots: list[Path] | None = None) -> Path:
    """Check one included file (``target`` as written, on line ``where``); return its resolved path.

    Raises ``error`` when the path is not absolute, the file is missing, not a regular file,
    empty (``/proc`` files report size 0), too large, outside ``roots`` after resolving
    symbolic links, or holds anything but models and subcircuits.
    """
    shown = target if len(target) <= 80 else target[:77] + "..."
    path = Path(target)
    if not path.is_absolute():
        raise error(f"{where}: the include '{shown}' is not an absolute path (ngspice runs in a private "
                    "folder); use device.include in the design, which pashape writes as an absolute path.")
    try:
        real = path.resolve(strict=True)
        st = os.stat(real)
    except (OSError, RuntimeError):
        raise error(f"{where}: the included file '{shown}' does not exist or cannot be read; check the path.") from None
    if roots is not None:
        inside = [r for r in roots if real == r or r in real.parents]
        if not inside:
            folders = ", ".join(str(r) for r in roots)
            raise error(f"{where}: the included file '{shown}' lies outside the design folder {folders} "
                        "(symbolic links are followed); copy the model file into the design folder.")
    if not stat.S_ISREG(st.st_mode) or st.st_size == 0:
        raise error(f"{where}: the included file '{shown}' is not a non-empty regular file; give a model file.")
    if st.st_size > MAX_MODEL_BYTES:
        raise error(f"{where}: the included file '{shown}' has {st.st_size} bytes (limit {MAX_MODEL_BYTES}); "
                    "include only the models the design uses.")
    try:
        text = real.read_text(encoding="utf-8")
    except UnicodeDecodeError:
        raise error(f"{where}: the included file '{shown}' is not UTF-8 text; give a SPICE model file.") from None
    except OSError as exc:
        raise error(f"{where}: the included file '{shown}' cannot be read ({exc.strerror}).") from None
    _scan(text, f"{where}: model file {real}", error, model=True, title=False)
    return real


def check_netlist_text(netlist: str, where: str, error, roots: list[Path] | None = None) -> list[Path]:
    """Refuse a netlist that could make ngspice run a command or read a file it should not.

    Parameters
    ----------
    netlist : str
        The netlist as ngspice will read it (first line: the title).
    where : str
        How messages name it (``"template t.j2: rendered netlist"``, ``"Netlist"``).
    error : type
        Exception class raised (a :class:`netgen.errors.NetgenError` subclass).
    roots : list of Path, optional
        Folders included files must lie in (resolved); None accepts any folder.

    Returns
    -------
    list of Path
        The resolved included files.
    """
    roots = None if roots is None else [Path(r).resolve() for r in roots]
    files = []
    for number, target in _scan(netlist, where, error, model=False, title=True):
        files.append(check_model_file(target, f"{where} line {number}", error, roots))
    return files
