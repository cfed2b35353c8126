"""The Jinja sandbox of the templates, with bounded work: no template can hang or exhaust memory.

Jinja's :class:`~jinja2.sandbox.SandboxedEnvironment` stops attribute escapes but not work: a
template may loop 10^10 times, repeat a string to gigabytes, raise ``**`` to a huge power or
double a string in a loop. :class:`BoundedEnvironment` charges every step of a render to one
budget (:class:`Budget`) and stops the render with :class:`LimitExceeded` when a limit is
passed:

* every loop iteration, call, operator and output piece costs work (``MAX_WORK`` in all);
* no single string, list, tuple or dict made by ``*``, ``+``, ``%``, ``~``, a call or a filter
  may exceed ``MAX_ITEMS`` items; integers are limited to ``MAX_INT_BITS`` bits (checked before
  ``**`` and ``*`` compute them);
* the output of one render (``{{ }}`` and literal text, in blocks and macros too) is limited to
  ``MAX_OUTPUT_CHARS``;
* an integer argument above ``MAX_ITEMS`` (a width, a count) is refused before the call.

Loops, concatenations and outputs are reached by rewriting the parsed template (each ``for``
iterable, each ``~`` and each output piece goes through a counting filter); operators through
``intercepted_binops``; calls through :meth:`BoundedEnvironment.call`; filters by wrapping them.
"""

from __future__ import annotations

import contextvars
import functools
import re

import jinja2
from jinja2 import nodes
from jinja2.sandbox import SandboxedEnvironment
from jinja2.visitor import NodeTransformer

__all__ = [
    "MAX_INT_BITS",
    "MAX_ITEMS",
    "MAX_OUTPUT_CHARS",
    "MAX_WORK",
    "BoundedEnvironment",
    "Budget",
    "LimitExceeded",
    "bounded",
]

#: total work of one render (a loop iteration or call costs ITERATION_COST, a value its size)
MAX_WORK = 20_000_000
ITERATION_COST = 10
#: largest string/list/tuple/dict a template may make
MAX_ITEMS = 1_000_000
#: largest integer a template may make, bits
MAX_INT_BITS = 4096
#: largest output of one render, characters
MAX_OUTPUT_CHARS = 10_000_000

#: a width or precision of a million or more in a str.format field / a %-format (or a '*' one)
_FMT_WIDTH = re.compile(r"\{[^{}]*:[^{}]*\d{7,}[^{}]*\}")
_PCT_WIDTH = re.compile(r"%[-+ #0]*(\d{7,}|\*)|%[-+ #0]*\d*\.(\d{7,}|\*)")


class LimitExceeded(Exception):
    """A render passed one of the limits; the message says which (``... exceeded``)."""


class Budget:
    """The work, output and size counters of one render."""

    def __init__(self):
        self.work = 0
        self.output = 0

    def charge(self, units: int) -> None:
        self.work += units
        if self.work > MAX_WORK:
            raise LimitExceeded(f"work limit of {MAX_WORK} steps exceeded (a loop or recursion that runs too long)")

    def out(self, chars: int) -> None:
        self.output += chars
        self.charge(chars)
        if self.output > MAX_OUTPUT_CHARS:
            raise LimitExceeded(f"output size limit of {MAX_OUTPUT_CHARS} characters exceeded")


_BUDGET: contextvars.ContextVar[Budget | None] = contextvars.ContextVar("netgen_template_budget", default=None)


def _budget() -> Budget:
    b = _BUDGET.get()
    if b is None:  # a render outside bounded(): still bounded, with a fresh budget
        b = Budget()
        _BUDGET.set(b)
    return b


class bounded:
    """Context manager: one fresh :class:`Budget` for the renders inside it."""

    def __enter__(self) -> Budget:
        self.budget = Budget()
        self.token = _BUDGET.set(self.budget)
        return self.budget

    def __exit__(self, *exc):
        _BUDGET.reset(self.token)
        return False


def _size(value) -> int:
    if isinstance(value, (str, bytes, list, tuple, dict, set, frozenset)):
        return len(value)
    return 1


def _check_value(value):
    """Refuse a value that is too big; return it."""
    if isinstance(value, bool):
        return value
    if isinstance(value, int) and value.bit_length() > MAX_INT_BITS:
        raise LimitExceeded(f"integer size limit of {MAX_INT_BITS} bits exceeded")
    n = _size(value)
    if n > MAX_ITEMS:
        raise LimitExceeded(f"size limit of {MAX_ITEMS} items exceeded (a string or list too long)")
    _budget().charge(n)
    return value


def _check_args(args, kwargs) -> None:
    for a in list(args) + list(kwargs.values()):
        if isinstance(a, int) and not isinstance(a, bool) and abs(a) > MAX_ITEMS:
            raise LimitExceeded(f"argument limit of {MAX_ITEMS} exceeded (a width or count of {a})")
        if isinstance(a, str) and "{" in a and _FMT_WIDTH.search(a):
            raise LimitExceeded(f"argument limit of {MAX_ITEMS} exceeded (a format width)")


def _binop_estimate(op: str, left, right) -> None:
    """Refuse ``left op right`` before computing it when the result would be too big."""
    ints = isinstance(left, int) and isinstance(right, int)
    if op == "**" and ints and right > 0 and abs(left) > 1 and right * abs(left).bit_length() > MAX_INT_BITS:
        raise LimitExceeded(f"integer size limit of {MAX_INT_BITS} bits exceeded ({left} ** {right})")
    if op == "*":
        if ints and left.bit_length() + right.bit_length() > MAX_INT_BITS + 1:
            raise LimitExceeded(f"integer size limit of {MAX_INT_BITS} bits exceeded")
        for seq, count in ((left, right), (right, left)):
            if isinstance(count, int) and not isinstance(seq, (int, float)) and count > 0:
                if _size(seq) * count > MAX_ITEMS:
                    raise LimitExceeded(f"size limit of {MAX_ITEMS} items exceeded (a sequence repeated {count} times)")
    if op == "+" and not ints and _size(left) + _size(right) > MAX_ITEMS:
        raise LimitExceeded(f"size limit of {MAX_ITEMS} items exceeded (a concatenation)")
    if op == "%" and isinstance(left, str):
        if _PCT_WIDTH.search(left):
            raise LimitExceeded(f"argument limit of {MAX_ITEMS} exceeded (a '%' format width)")


@jinja2.pass_context
def _loop_filter(context, iterable):
    budget = _budget()
    for item in iterable:
        budget.charge(ITERATION_COST)
        yield item


@jinja2.pass_context
def _concat_filter(context, parts):
    texts = [str(p) for p in parts]
    total = sum(len(t) for t in texts)
    if total > MAX_ITEMS:
        raise LimitExceeded(f"size limit of {MAX_ITEMS} items exceeded (a '~' concatenation)")
    _budget().charge(total)
    return "".join(texts)


@jinja2.pass_context
def _out_filter(context, value):
    _budget().out(len(value) if isinstance(value, str) else len(str(value)))
    return value


class _Rewrite(NodeTransformer):
    """Route loops, ``~`` and output pieces through the counting filters."""

    def _filter(self, node, name):
        return nodes.Filter(node, name, [], [], None, None, lineno=node.lineno)

    def visit_For(self, node):
        node = self.generic_visit(node)
        node.iter = self._filter(node.iter, "_netgen_loop")
        return node

    def visit_Concat(self, node):
        node = self.generic_visit(node)
        return self._filter(nodes.List(node.nodes, lineno=node.lineno), "_netgen_concat")

    def visit_Output(self, node):
        node = self.generic_visit(node)
        node.nodes = [self._filter(nodes.Const(c.data, lineno=c.lineno) if isinstance(c, nodes.TemplateData) else c,
                                   "_netgen_out") for c in node.nodes]
        return node


def _wrap_filter(func):
    """A filter with its arguments checked before and its result after the call."""

    skip = 2 if getattr(func, "jinja_pass_arg", None) is not None else 1  # context/environment, value

    name = getattr(func, "__name__", "")

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        _check_args(args[skip:], kwargs)
        value = args[skip - 1] if len(args) >= skip else None
        if name == "do_format" and isinstance(value, str):
            _binop_estimate("%", value, None)
        if name == "do_join" and isinstance(value, (list, tuple)) and sum(_size(x) for x in value) > MAX_ITEMS:
            raise LimitExceeded(f"size limit of {MAX_ITEMS} items exceeded (a join)")
        _budget().charge(ITERATION_COST)
        return _check_value(func(*args, **kwargs))

    return wrapper


class BoundedEnvironment(SandboxedEnvironment):
    """A :class:`SandboxedEnvironment` whose renders are bounded in work, size and output."""

    intercepted_binops = frozenset({"*", "**", "+", "%", "//"})

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        for name in ("lipsum", "cycler", "joiner"):  # no use in a netlist; lipsum makes text in bulk
            self.globals.pop(name, None)
        self.filters = {name: _wrap_filter(f) for name, f in self.filters.items()}
        self.filters.update(_netgen_loop=_loop_filter, _netgen_concat=_concat_filter, _netgen_out=_out_filter)

    def _parse(self, source, name, filename):
        return _Rewrite().visit(super()._parse(source, name, filename))

    def wrap_str_format(self, value):
        f_self = getattr(value, "__self__", None)
        if isinstance(f_self, str) and getattr(value, "__name__", "") in ("format", "format_map"):
            _check_args([f_self], {})  # a huge field width would build the string first
        return super().wrap_str_format(value)

    def call_binop(self, context, operator, left, right):
        _budget().charge(ITERATION_COST)
        _binop_estimate(operator, left, right)
        return _check_value(super().call_binop(context, operator, left, right))

    def call(__self, __context, __obj, *args, **kwargs):
        budget = _budget()
        budget.charge(ITERATION_COST)
        if __obj is not __self.globals.get("range"):
            _check_args(args, kwargs)
        if getattr(__obj, "__name__", "") == "replace" and isinstance(getattr(__obj, "__self__", None), str) \
                and len(args) >= 2 and isinstance(args[0], str) and isinstance(args[1], str):
            s = __obj.__self__
            if len(s) + (s.count(args[0]) if args[0] else len(s) + 1) * len(args[1]) > MAX_ITEMS:
                raise LimitExceeded(f"size limit of {MAX_ITEMS} items exceeded (a replace)")
        if getattr(__obj, "__name__", "") == "join" and isinstance(getattr(__obj, "__self__", None), str) and args:
            items = args[0]
            if isinstance(items, (list, tuple)) and sum(_size(x) for x in items) > MAX_ITEMS:
                raise LimitExceeded(f"size limit of {MAX_ITEMS} items exceeded (a join)")
        return _check_value(super().call(__context, __obj, *args, **kwargs))
