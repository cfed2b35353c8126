"""Shared fixtures: a minimal valid design document, a TOML writer and an in-process CLI runner.

Kept small on purpose; tests that need more build it themselves.
"""

from __future__ import annotations

import copy
from pathlib import Path

import pytest
import tomlkit

#: The smallest valid design (an invented 8 W, 915 MHz bench stage).
MINIMAL_DOC = {
    "design": {
        "name": "bench_stage",
        "topology": "class_f_line",
        "f0": "915 MHz",
        "vdd": "24 V",
        "pout": "8 W",
    }
}


@pytest.fixture
def design_doc():
    """A fresh deep copy of :data:`MINIMAL_DOC` (a plain dict to modify)."""
    return copy.deepcopy(MINIMAL_DOC)


def write_toml(path: Path, doc: dict) -> Path:
    """Write ``doc`` as TOML (tomlkit does the quoting, so any string survives)."""
    path = Path(path)
    path.write_text(tomlkit.dumps(doc), encoding="utf-8")
    return path


@pytest.fixture
def netgen_cli(capsys):
    """Run ``pashape ARGS...`` in this process through ``netgen.cli.root.main``.

    Returns a function ``run(*args) -> (exit_code, stdout, stderr)``.
    """
    from netgen.cli.root import main

    def run(*args):
        capsys.readouterr()
        try:
            main([str(a) for a in args])
            code = 0
        except SystemExit as exc:
            code = exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 1)
        out, err = capsys.readouterr()
        return code, out, err

    return run
