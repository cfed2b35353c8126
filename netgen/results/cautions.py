"""The safety cautions every output carries, in one place.

The terminal shows :data:`CAUTION_LINE` once per run, the report :data:`CAUTION_SHORT` beside its
summary and :func:`caution_texts` in full at the end, and the hand-off pack README the full text too.
The wording follows the usual cautions of RF power work: high voltages, RF burns and exposure,
emission limits, and deference to local codes and licensed practice.
"""

from __future__ import annotations

__all__ = ["CAUTION_LINE", "CAUTION_SHORT", "caution_texts"]

#: One line for the terminal (stderr), printed on every run.
CAUTION_LINE = ("Caution: a built amplifier carries high voltages and RF power that burns; simulated harmonics "
                "are not emission-compliance evidence; follow local codes and licensed practice.")

#: A short caution for the report's summary (the full list is at the end of the report).
CAUTION_SHORT = ("Built hardware carries high drain voltages and RF power that burns; these idealised "
                 "simulations are not emission-compliance evidence; follow local codes and licensed practice.")

_HIGH_VOLTAGE = ("High voltage: a switching stage's drain swings to several times the supply (class E about "
                 "3.6 Vdd, inverse class F about 3.1 Vdd){peak}; rate devices, capacitors and probes for it with "
                 "margin, and keep clear of live circuits.")
_RF_BURNS = ("RF burns and exposure: watts of RF at an output, an open cable or an antenna burn skin on contact "
             "and expose people to RF fields; never touch an energised output, work into dummy loads and "
             "shielded set-ups, and keep exposure within the limits that apply where you work.")
_EMISSIONS = ("Emission limits: harmonic and spurious emissions are limited by regulation; a simulated "
              "harmonic level comes from an idealised model and is not compliance evidence. Measure the built "
              "amplifier, with its filters, on a calibrated set-up.")
_MODELS_AND_CODES = ("Idealised models: the switch or simple device model, ideal lines and the stated losses "
                     "leave out parasitics, breakdown, thermal limits and stability. Follow local codes, your "
                     "organisation's safety rules and licensed practice before building, powering or "
                     "transmitting; this tool is an aid to design, not a substitute for them.")


def caution_texts(peak_vd_over_vdd: float | None = None) -> tuple[str, ...]:
    """The full cautions, one paragraph each.

    Parameters
    ----------
    peak_vd_over_vdd : float, optional
        The simulated peak drain voltage over Vdd; named in the high-voltage caution when given.

    Returns
    -------
    tuple of str
        High voltage, RF burns and exposure, emission limits, models and codes.
    """
    peak = "" if peak_vd_over_vdd is None else f"; this design's simulated peak is {peak_vd_over_vdd:.2f} x Vdd"
    return (_HIGH_VOLTAGE.format(peak=peak), _RF_BURNS, _EMISSIONS, _MODELS_AND_CODES)
