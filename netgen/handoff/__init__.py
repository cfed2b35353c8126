"""Hand-off: what leaves the designer's desk. Regression of designs against golden metrics and packs.

Takes design files (and their ``*.expect.json`` goldens); gives check results, design diffs and
hand-off packs (portable and ngspice netlists, Touchstone, expected metrics) for colleagues on
other simulators.

Modules: ``regress`` (goldens and check), ``diff`` (two designs compared), ``export`` (packs), ``pytest_plugin``
(``--pashape-designs=DIR`` runs a folder of designs as tests).
"""

from netgen.lazy import lazy_exports

#: public name -> module of this package that defines it (loaded on first use, so importing
#: the package costs nothing and pulls in no heavy dependency)
_EXPORTS = {
    "GOLDEN_SUFFIX": "regress",
    "accept": "regress",
    "check_designs": "regress",
    "diff_designs": "diff",
    "export_pack": "export",
    "section_touchstone_text": "blocks",
    "format_diff": "diff",
    "format_result": "regress",
    "format_summary": "regress",
}

__all__ = sorted(_EXPORTS)


__getattr__, __dir__ = lazy_exports(__name__, _EXPORTS)
