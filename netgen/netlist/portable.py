"""Portable-netlist checker: is a netlist inside the SPICE3 subset we hand to colleagues?

A hand-off netlist must read in any SPICE3-derived simulator, not only in
ngspice. :func:`check_portable` reads the text card by card and lists every
construct outside a deliberately strict subset (docs/handoff.md explains each
rule). It parses text only; it never runs a simulator.

The subset (Berkeley SPICE3 input format; the allowed letters, cards, source
functions and B-source functions are those of the SPICE3 input language, from
memory of the SPICE3 user's guide, and are common practice for "portable" decks):

* the first line is the title (SPICE3 ignores it whatever it says), the last
  card is ``.end``;
* element letters ``R C L K V I E F G H S W T O U D Q J M Z X B``;
* dot-cards ``.model .subckt .ends .tran .ac .op .ic .nodeset .options
  .print .title .end``; no ``.control``/``.endc``, ``.param``, ``.include``,
  ``.lib``, ``.func``, ``.meas``, ``.save`` or any other card;
* ``.options`` only with SPICE3 keys (plus ``minbreak``, a breakpoint spacing
  every SPICE3-derived simulator honours or ignores);
* independent-source functions ``DC AC PULSE SIN EXP PWL SFFM``;
* B-source expressions with SPICE3 functions only (no ``if``, ``min``,
  ``max``, ``pwl``, ternaries or comparisons) and no ``{...}`` parameter
  expressions anywhere;
* model types of SPICE3 (``R C SW CSW URC LTRA D NPN PNP NJF PJF NMOS PMOS
  NMF PMF``);
* no in-line comments (``;``, ``$``, ``//``), no backslash continuation, no
  absolute paths, ASCII only, ground named ``0``;
* continuation lines (``+``) must follow a card directly (not a comment or a
  blank line); cards at most :data:`MAX_CARD_CHARS` characters, comment lines
  at most :data:`MAX_COMMENT_CHARS`.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

from netgen.errors import RenderError

__all__ = [
    "portable_cards",
    "format_number",
    "PORTABLE_CARD_CHARS",
    "MINBREAK_DIVISOR",
    "Problem",
    "check_portable",
    "format_problems",
    "ELEMENT_LETTERS",
    "DOT_CARDS",
    "OPTION_KEYS",
    "MODEL_TYPES",
    "B_FUNCTIONS",
    "MAX_CARD_CHARS",
    "MAX_COMMENT_CHARS",
]

#: Element letters of the SPICE3 input language.
ELEMENT_LETTERS = frozenset("RCLKVIEFGHSWTOUDQJMZXB")
#: Dot-cards a portable deck may carry.
DOT_CARDS = frozenset(
    [".model", ".subckt", ".ends", ".tran", ".ac", ".op", ".ic", ".nodeset", ".options", ".print", ".title", ".end"]
)
#: ``.options`` keys of SPICE3 (from memory of the SPICE3 user's guide) plus ``minbreak``.
OPTION_KEYS = frozenset(
    """abstol chgtol defad defas defl defw gmin itl1 itl2 itl3 itl4 itl5 maxord method
    pivrel pivtol reltol temp tnom trtol vntol trytocompact keepopinfo bypass acct list
    nomod nopage node opts minbreak""".split()
)
#: ``.model`` types of SPICE3.
MODEL_TYPES = frozenset("r c sw csw urc ltra d npn pnp njf pjf nmos pmos nmf pmf".split())
#: Functions a SPICE3 B source understands (SPICE3 user's guide, "Non-linear dependent sources").
B_FUNCTIONS = frozenset(
    "abs acos acosh asin asinh atan atanh cos cosh exp ln log sin sinh sqrt tan tanh u uramp".split()
)
#: Independent-source waveform functions of SPICE3.
SOURCE_FUNCTIONS = frozenset("dc ac pulse sin exp pwl sffm distof1 distof2".split())
#: SPICE2-era card width; the most conservative readers stop there.
MAX_CARD_CHARS = 80
#: Comment lines are read and thrown away, but some readers use fixed buffers.
MAX_COMMENT_CHARS = 255

_OPTION_VALUES = {"method": {"trap", "trapezoidal", "gear"}}
_ABS_PATH = re.compile(r"""(?:^|[\s='"(,])(/[A-Za-z0-9_.~-]+/|~/|[A-Za-z]:[\\/]|\\\\)""")
_IDENT = re.compile(r"[A-Za-z_][A-Za-z0-9_.]*")
_NUMBER = re.compile(r"(?<![A-Za-z_])(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?[A-Za-z]*")
_SOURCE_WORD = re.compile(r"\b([A-Za-z]+)\s*\(")


@dataclass(frozen=True)
class Problem:
    """One construct outside the portable subset.

    Attributes
    ----------
    line : int
        1-based line number in the checked text (the first physical line of the card).
    what : str
        The offending text, short.
    why : str
        Why it is not portable and what to write instead.
    """

    line: int
    what: str
    why: str

    def __str__(self) -> str:
        return f"line {self.line}: {self.what}: {self.why}"


def format_problems(problems: list[Problem]) -> str:
    """One line per problem (``line N: what: why``)."""
    return "\n".join(str(p) for p in problems)


def _cards(lines: list[str], problems: list[Problem]) -> list[tuple[int, str]]:
    """Join ``+`` continuation lines into cards; report misplaced continuations."""
    cards: list[tuple[int, str]] = []
    prev_kind = "title"
    for no, raw in enumerate(lines[1:], start=2):
        line = raw.rstrip("\r\n")
        stripped = line.strip()
        if not stripped:
            prev_kind = "blank"
            continue
        if stripped.startswith("*"):
            prev_kind = "comment"
            continue
        if line.startswith("+"):
            if prev_kind != "card" or not cards:
                problems.append(Problem(no, "+ continuation", f"follows a {prev_kind} line, not a card; "
                                        "SPICE3 readers disagree on what it continues; put it right after its card"))
                continue
            first, text = cards[-1]
            cards[-1] = (first, text + " " + line[1:].strip())
            continue
        if line[0] in " \t":
            problems.append(Problem(no, stripped[:20], "the card starts with white space; some readers take it as a "
                                    "continuation or a comment; start cards in column 1"))
        cards.append((no, stripped))
        prev_kind = "card"
    return cards


def check_portable(text: str) -> list[Problem]:
    """List the constructs of ``text`` outside the portable SPICE3 subset.

    Parameters
    ----------
    text : str
        A whole netlist (the first line is its title).

    Returns
    -------
    list of Problem
        Empty when the netlist is portable; otherwise one entry per problem,
        in line order.
    """
    problems: list[Problem] = []
    lines = text.splitlines()
    if not lines or not lines[0].strip():
        problems.append(Problem(1, "title", "the first line is the title in SPICE3; give it one (it must not be empty)"))
    elif _looks_like_card(lines[0]):
        problems.append(Problem(1, lines[0][:30], "looks like an element card, but SPICE3 reads the first line as "
                                "the title and drops it; put a title line first"))
    for no, raw in enumerate(lines, start=1):
        line = raw.rstrip("\r\n")
        if any(ord(ch) > 126 or (ord(ch) < 32 and ch != "\t") for ch in line):
            problems.append(Problem(no, "non-ASCII character", "some readers reject bytes outside printable ASCII; "
                                    "write units and names in plain ASCII"))
        limit = MAX_COMMENT_CHARS if line.lstrip().startswith("*") or no == 1 else MAX_CARD_CHARS
        if len(line) > limit:
            problems.append(Problem(no, f"{len(line)} characters", f"longer than {limit}; split the card with '+' "
                                    "continuation lines"))
        if no > 1 and not line.lstrip().startswith("*"):
            if line.rstrip().endswith("\\"):
                problems.append(Problem(no, "backslash continuation", "not SPICE3; continue on the next line with '+'"))
            for mark, name in ((";", "';' comment"), ("//", "'//' comment"), ("$", "'$' comment")):
                if mark in line:
                    problems.append(Problem(no, name, "in-line comments are not SPICE3; put the comment on its "
                                            "own line starting with '*'"))
                    break
        if _ABS_PATH.search(line):
            problems.append(Problem(no, "absolute path", "a pack must not depend on the sender's file system; "
                                    "inline the model instead of referring to a file"))
    cards = _cards(lines, problems)
    ended = False
    in_control = False
    for no, card in cards:
        if in_control:
            in_control = not card.lower().startswith(".endc")
            continue
        if card.lower().startswith(".control"):
            in_control = True
        if ended:
            problems.append(Problem(no, card.split()[0], "after .end; SPICE3 stops reading at .end"))
            continue
        if "{" in card or "}" in card:
            problems.append(Problem(no, "{...}", "brace parameter expressions are an extension; write the number"))
        low = card.lower()
        if low.startswith("."):
            ended = _check_dot(no, low, problems)
        else:
            _check_element(no, card, problems)
    if not ended:
        problems.append(Problem(len(lines), ".end", "missing; a SPICE3 deck ends with a .end card"))
    problems.sort(key=lambda p: p.line)
    return problems


def _looks_like_card(line: str) -> bool:
    words = line.split()
    if len(words) < 4 or line[0] in " *" or words[0][0].upper() not in ELEMENT_LETTERS:
        return False
    return "0" in words[1:3] or bool(_NUMBER.fullmatch(words[-1]))


def _check_dot(no: int, low: str, problems: list[Problem]) -> bool:
    words = low.replace("(", " ( ").replace(")", " ) ").replace("=", " = ").split()
    card = words[0]
    if card not in DOT_CARDS:
        hint = {
            ".control": "control blocks are ngspice's; the receiver sets up the run in their own tool",
            ".endc": "control blocks are ngspice's",
            ".param": "parameters are an extension; write the numbers",
            ".include": "a pack carries every model inline",
            ".inc": "a pack carries every model inline",
            ".lib": "a pack carries every model inline",
            ".func": "user functions are an extension",
            ".meas": "measurements are simulator-specific; the README says how to compute the metrics",
            ".measure": "measurements are simulator-specific",
            ".save": "vector selection is simulator-specific; every node is saved by default",
            ".global": "not in SPICE3's input format",
        }.get(card, "not a SPICE3 card")
        problems.append(Problem(no, card, hint))
        return False
    if card == ".end":
        return True
    if card == ".options":
        i = 1
        while i < len(words):
            key = words[i]
            value = None
            if i + 2 < len(words) + 1 and i + 1 < len(words) and words[i + 1] == "=":
                value = words[i + 2] if i + 2 < len(words) else None
                i += 3
            else:
                i += 1
            if key not in OPTION_KEYS:
                problems.append(Problem(no, f"option {key}", "simulator-specific option; SPICE3 does not know it"))
            elif key in _OPTION_VALUES and value not in _OPTION_VALUES[key]:
                problems.append(Problem(no, f"{key}={value}", f"SPICE3 accepts {' or '.join(sorted(_OPTION_VALUES[key]))}"))
    if card == ".model" and len(words) >= 3:
        mtype = words[2]
        if mtype not in MODEL_TYPES:
            problems.append(Problem(no, f"model type {mtype}", "not a SPICE3 model type"))
    return False


def _check_element(no: int, card: str, problems: list[Problem]) -> None:
    letter = card[0].upper()
    name = card.split()[0]
    if letter not in ELEMENT_LETTERS:
        why = {
            "A": "XSPICE code models are ngspice's",
            "N": "not SPICE3 (a simulator-specific device)",
            "P": "coupled multiconductor lines are ngspice's",
            "Y": "TXL lines are ngspice's",
        }.get(letter, "not a SPICE3 element letter")
        problems.append(Problem(no, name, why))
        return
    tokens = card.split()
    if any(t.lower() in ("gnd", "gnd!") for t in tokens[1:3]):
        problems.append(Problem(no, "node gnd", "ground is node 0 in SPICE3; 'gnd' is an alias only some readers know"))
    if letter == "B":
        _check_bsource(no, card, problems)
    elif letter in "VI":
        for word in _SOURCE_WORD.findall(card[len(name):]):
            if word.lower() not in SOURCE_FUNCTIONS:
                problems.append(Problem(no, f"{word}(", "not a SPICE3 source function (DC AC PULSE SIN EXP PWL SFFM)"))
        for word in tokens[3:]:
            if word.lower() in ("trnoise", "trrandom", "am", "portnum", "z0"):
                problems.append(Problem(no, word, "not a SPICE3 source parameter"))
    elif letter in "EG" and len(tokens) > 3:
        word = re.split(r"[={(\s]", tokens[3], maxsplit=1)[0].lower()
        if word in ("value", "table", "laplace", "freq", "vol", "cur"):
            problems.append(Problem(no, word.upper(), "behavioural E/G sources are an extension; use a B source"))


def _check_bsource(no: int, card: str, problems: list[Problem]) -> None:
    match = re.search(r"\b([VIvi])\s*=\s*(.*)$", card)
    if not match:
        problems.append(Problem(no, card.split()[0], "a SPICE3 B source needs V=expr or I=expr"))
        return
    expr = match.group(2)
    for op in ("?", "<", ">", "==", "!=", "&&", "||", "!"):
        if op in expr:
            problems.append(Problem(no, op, "comparisons, logic and ternaries are not SPICE3 B-source syntax"))
            break
    for m in re.finditer(r"([A-Za-z_][A-Za-z0-9_]*)\s*\(", expr):
        fname = m.group(1).lower()
        if fname in ("v", "i"):
            continue
        if fname not in B_FUNCTIONS:
            problems.append(Problem(no, f"{m.group(1)}(", "not a SPICE3 B-source function; SPICE3 has "
                                    + " ".join(sorted(B_FUNCTIONS))))
    bare = re.sub(r"\b[VvIi]\s*\([^)]*\)", " 1 ", expr)
    bare = re.sub(r"[A-Za-z_][A-Za-z0-9_]*\s*\(", "(", bare)
    bare = _NUMBER.sub(" ", bare)
    for m in _IDENT.finditer(bare):
        word = m.group(0)
        if word.lower() != "time":
            problems.append(Problem(no, word, "names in a SPICE3 B source are v(...), i(...) and time only"))


# ---------------------------------------------------------------- writing the portable dialect

def format_number(value) -> str:
    """The only number formatter of the templates: ``'{:.10g}'``; refuses NaN/inf."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise RenderError(f"template: the 'n' filter needs a number, got {type(value).__name__}; pass a numeric context value.")
    x = float(value)
    if not math.isfinite(x):
        raise RenderError(f"template: a value is {x!r}; every netlist number must be finite (check the sized values).")
    return "{:.10g}".format(x)


#: card width of the portable dialect (SPICE2-era 80 columns; netgen.netlist.portable.MAX_CARD_CHARS)
PORTABLE_CARD_CHARS = 80
#: comment-line width of the portable dialect (netgen.netlist.portable.MAX_COMMENT_CHARS)
PORTABLE_COMMENT_CHARS = 255
#: minbreak = TMAX / MINBREAK_DIVISOR when the netlist has T lines (measured: docs/simulator_notes.md)
MINBREAK_DIVISOR = 100.0


def portable_cards(text: str) -> str:
    """The card-level rules of the portable dialect applied to a rendered netlist.

    1. ``.save`` cards (and their ``+`` lines) are dropped: vector selection is
       simulator-specific, and a SPICE3 reader keeps every node anyway.
    2. When the netlist has a ``T`` line, ``.options minbreak=<TMAX/100>`` goes right
       before ``.tran``. Measured in ngspice 39 (docs/simulator_notes.md): a lossless T line in
       a switching circuit makes the time step collapse after a few hundred periods unless
       near-coincident breakpoints are merged; 0.01 TMAX cured every case tried.
       docs/portable_dialect.md says what a simulator without the option should do.
    3. Cards longer than 80 characters are split at spaces onto ``+`` continuation lines
       (a word longer than a line, e.g. a B-source expression, after an operator); comment
       lines longer than 255 characters are split into several comment lines.

    Parameters
    ----------
    text : str
        A netlist as ``render`` finishes it (ends with ``.end``).

    Returns
    -------
    str
        The portable netlist; idempotent (applying it twice changes nothing).
    """
    lines = text.splitlines()
    kept: list[str] = []
    dropping = False
    for ln in lines:
        low = ln.lstrip().lower()
        if low.startswith(".save"):
            dropping = True
            continue
        if dropping and ln.startswith("+"):
            continue
        dropping = False
        kept.append(ln)
    has_line = any(ln[:1].upper() == "T" for ln in kept)
    has_minbreak = any(ln.lower().startswith(".options") and "minbreak" in ln.lower() for ln in kept)
    out: list[str] = []
    for ln in kept:
        words = ln.split()
        if has_line and not has_minbreak and words and words[0].lower() == ".tran":
            out.append(f".options minbreak={format_number(_tran_tmax(words) / MINBREAK_DIVISOR)}")
        out.extend(_wrap_card(ln))
    return "\n".join(out) + "\n"


def _tran_tmax(words: list[str]) -> float:
    """TMAX of a ``.tran TSTEP TSTOP [TSTART [TMAX]] [uic]`` card (TSTEP when TMAX is absent), s."""
    from .cards import (
        parse_spice_number,  # a user template may write scale suffixes (1p)
    )

    rest = [w for w in words[1:] if w.lower() != "uic"]
    try:
        return parse_spice_number(rest[3] if len(rest) > 3 else rest[0])
    except (IndexError, ValueError):
        raise RenderError(f"template: the .tran card '{' '.join(words)}' has no readable TSTEP/TMAX; write '.tran TSTEP TSTOP 0 TMAX uic'.") from None


def _wrap_card(line: str) -> list[str]:
    """One card or comment line split to the portable widths."""
    if line.lstrip().startswith("*"):
        if len(line) <= PORTABLE_COMMENT_CHARS:
            return [line]
        body = line.lstrip()[1:].strip()
        width = PORTABLE_COMMENT_CHARS - 4
        return ["* " + body[i:i + width] for i in range(0, len(body), width)]
    width = PORTABLE_CARD_CHARS
    if len(line) <= width:
        return [line]
    words: list[str] = []
    for w in line.split():
        while len(w) > width - 2:  # room for the "+ " of a continuation line
            cut = _operator_cut(w, width - 2)
            if cut <= 0:
                break
            words.append(w[: cut + 1])
            w = w[cut + 1:]
        words.append(w)
    out, cur = [], ""
    for w in words:
        if cur and len(cur) + 1 + len(w) > width:
            out.append(cur)
            cur = "+ " + w
        else:
            cur = f"{cur} {w}" if cur else w
    out.append(cur)
    return out


def _operator_cut(word: str, limit: int) -> int:
    """Index of the last operator before ``limit`` after which ``word`` may be split (-1: none).

    The sign of an exponent (``1e-09``) is not an operator: splitting there would break the number.
    """
    for i in range(min(limit, len(word)) - 1, 0, -1):
        ch = word[i]
        if ch in "*/,":
            return i
        if ch in "+-" and not (word[i - 1] in "eE" and i >= 2 and (word[i - 2].isdigit() or word[i - 2] == ".")):
            return i
    return -1
