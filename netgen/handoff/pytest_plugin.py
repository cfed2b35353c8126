"""pytest plugin: run a folder of designs with golden metrics as tests.

Registered as the ``pytest11`` entry point ``pashape_designs``, so it is active
wherever pashape is installed; it does nothing unless ``--pashape-designs`` is
given (``--netgen-designs``, the name before the rename, is still accepted)::

    pytest --pashape-designs=designs/            # one test per design with a golden
    pytest --pashape-designs=designs/ -n 2       # in parallel with pytest-xdist

Each design ``x.toml`` with ``x.expect.json`` beside it becomes one test item
``x.expect.json::x``; it fails with the table of deviations (netgen.handoff.regress).
The design folders are added to the collection arguments, so no other path
needs to be given. Items carry the ``ngspice`` and ``slow`` markers.
"""

from __future__ import annotations

from pathlib import Path

import pytest

OPTION = "--pashape-designs"
#: the option's name before the command was renamed (still accepted)
OLD_OPTION = "--netgen-designs"


def pytest_addoption(parser):
    group = parser.getgroup("pashape", "pashape design regression")
    group.addoption(
        OPTION,
        OLD_OPTION,
        dest="pashape_designs",
        action="append",
        default=[],
        metavar="PATH",
        help="Folder (or design file) of pashape designs with golden *.expect.json files; "
             "each becomes a test. May be repeated.",
    )


def _roots(config) -> list[Path]:
    return [Path(p).resolve() for p in config.getoption("pashape_designs") or []]


def pytest_configure(config):
    roots = _roots(config)
    if not roots:
        return
    for p in roots:
        if not p.exists():
            raise pytest.UsageError(f"{OPTION}={p}: no such file or folder.")
    # collect the design folders as well as whatever else was asked for
    args = list(config.args)
    for p in roots:
        target = str(p.with_name(p.name[: -len(".toml")] + ".expect.json")) if p.suffix == ".toml" else str(p)
        if target not in args:
            args.append(target)
    config.args[:] = args


def _wanted(config, file_path: Path) -> bool:
    from .regress import GOLDEN_SUFFIX

    if not file_path.name.endswith(GOLDEN_SUFFIX):
        return False
    path = file_path.resolve()
    for root in _roots(config):
        if root.is_dir() and root in path.parents:
            return True
        if root.suffix == ".toml" and path.name == root.name[: -len(".toml")] + GOLDEN_SUFFIX and path.parent == root.parent:
            return True
    return False


def pytest_collect_file(file_path: Path, parent):
    if _wanted(parent.config, Path(file_path)):
        return GoldenFile.from_parent(parent, path=Path(file_path))
    return None


class GoldenFile(pytest.File):
    """A golden file: one item, the design beside it."""

    def collect(self):
        from .regress import GOLDEN_SUFFIX

        design = self.path.with_name(self.path.name[: -len(GOLDEN_SUFFIX)] + ".toml")
        item = DesignItem.from_parent(self, name=design.stem, design_path=design)
        item.add_marker(pytest.mark.ngspice)
        item.add_marker(pytest.mark.slow)
        yield item


class DesignRegression(Exception):
    """A design outside its golden tolerances (the message is the table)."""


class DesignItem(pytest.Item):
    def __init__(self, *, design_path: Path, **kwargs):
        super().__init__(**kwargs)
        self.design_path = design_path

    def runtest(self):
        from .regress import check_designs, format_result

        if not self.design_path.is_file():
            raise DesignRegression(f"{self.path.name}: golden file without its design {self.design_path.name}.")
        (result,) = check_designs([self.design_path], jobs=1)
        if not result.ok:
            raise DesignRegression(format_result(result))

    def repr_failure(self, excinfo):
        if isinstance(excinfo.value, DesignRegression):
            return str(excinfo.value)
        from netgen.errors import NetgenError

        if isinstance(excinfo.value, NetgenError):
            return f"{type(excinfo.value).__name__}: {excinfo.value}"
        return super().repr_failure(excinfo)

    def reportinfo(self):
        return self.path, None, f"pashape design {self.design_path.name}"
