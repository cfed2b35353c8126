"""Results: settled waveforms become the metrics, the plots and the report.

Takes :class:`netgen.design.Waveforms`, the sized design and the netlist text; gives the metrics
dict (the metrics.json contract, docs/metrics.md), PNG figures and report.html, the terminal
table and the metrics/waveform files.

Modules: ``analysis`` (metrics, loss budget, warnings), ``plots`` (the only matplotlib user of
a single run), ``report`` (HTML, table, JSON and CSV writers), ``cautions`` (the safety texts every output carries).
"""

from netgen.lazy import lazy_exports

#: public name -> module of this package that defines it (loaded on first use, so importing
#: the package costs nothing and pulls in no heavy dependency)
_EXPORTS = {
    "CAUTION_LINE": "cautions",
    "CAUTION_SHORT": "cautions",
    "analyse": "analysis",
    "buildability_warnings": "stress",
    "caution_texts": "cautions",
    "design_warnings": "analysis",
    "format_table": "report",
    "plot_all": "plots",
    "write_metrics_json": "report",
    "write_report": "report",
    "write_waveforms_csv": "report",
}

__all__ = sorted(_EXPORTS)


__getattr__, __dir__ = lazy_exports(__name__, _EXPORTS)
