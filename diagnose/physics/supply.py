"""Coil voltage at the terminals against the rated voltage and the allowed band.

Bands, as fractions of the rated voltage:

* DC from a converter (power supply) or rectified AC: 0.90 to 1.10;
* DC from a battery: 0.85 to 1.15;
* a window defined by the pack overrides both (permanent-magnet brakes
  release only in a narrow window: too much voltage re-engages them).

A reading below :data:`ABSENT_FRACTION` (10 %) of rated is **absent**: no
brake coil releases there, and such a reading is induced or leakage voltage
rather than supply. A negative reading is **reversed** only when
``polarity_known`` (the meter's + lead is on the coil's + terminal);
otherwise it is judged by its magnitude.

Outside the band, two *signatures* name a likely cause when the inputs they
need are given (each is still low or high underneath: ``Verdict.fallback``):

* **half_wave** (needs ``ac_volts`` and ``rectifier_type``): a rectified
  supply through a bridge, and the reading is low and within
  :data:`~diagnose.physics.rectifier.PATTERN_TOLERANCE` (15 %) of the mean a
  half-wave rectifier gives from that AC (``sqrt(2)/pi * Vrms``, 0.4502):
  an open diode in the bridge;
* **coil_mismatch** (needs ``supply_voltage``): the machine's supply is
  itself outside the coil's band, and the reading is within the band of
  that supply: the supply works, but the coil is made for another voltage.

Inputs given as the text "unknown" count as not given. Without these inputs
the verdicts, figures and summary are the plain ones.

References:
    IEC 60204-1:2016, 4.3.3 "DC supplies" (from memory): converting
    equipment 0.9 to 1.1 of nominal, batteries 0.85 to 1.15 of nominal.
    Rashid, Power Electronics (any edition), diode rectifiers (textbook):
    mean output of single-phase half-wave and bridge rectifiers.
"""

from __future__ import annotations

from typing import Any, Mapping

from diagnose.physics.inputs import read_inputs, require
from diagnose.physics.rectifier import PATTERN_TOLERANCE, expected_dc
from diagnose.physics.units import above, below
from diagnose.physics.verdict import Verdict, make_figures, quantity_text

#: Allowed band per kind of source, as fractions of rated (IEC 60204-1, from memory).
BANDS: dict[str, tuple[float, float]] = {
    "converter": (0.90, 1.10),
    "rectified": (0.90, 1.10),
    "battery": (0.85, 1.15),
}
#: Below this fraction of rated the supply counts as absent.
ABSENT_FRACTION = 0.10
#: Optional inputs that only sharpen the verdict; the text "unknown" counts as not given.
SIGNATURE_INPUTS = ("supply_voltage", "ac_volts", "rectifier_type")


def supply_band(source: str, window_low: float | None = None,
                window_high: float | None = None) -> tuple[float, float]:
    """(low, high) fractions of rated allowed for ``source``; a pack window overrides.

    >>> supply_band("battery"), supply_band("converter", window_low=0.95)
    ((0.85, 1.15), (0.95, 1.1))
    """
    low, high = BANDS[source]
    return (window_low if window_low is not None else low,
            window_high if window_high is not None else high)


def judge_supply(rated: float, volts: float, band: tuple[float, float],
                 polarity_known: bool = False) -> str:
    """absent, reversed, low, ok or high for ``volts`` measured on a coil rated ``rated``.

    >>> judge_supply(24, 21.1, (0.9, 1.1)), judge_supply(24, -24, (0.9, 1.1), True)
    ('low', 'reversed')
    """
    ratio = abs(volts) / rated
    if ratio < ABSENT_FRACTION:
        return "absent"
    if volts < 0 and polarity_known:
        return "reversed"
    if below(ratio, band[0]):
        return "low"
    if above(ratio, band[1]):
        return "high"
    return "ok"


def judge_supply_signature(
    rated: float,
    volts: float,
    band: tuple[float, float],
    polarity_known: bool = False,
    *,
    source: str = "converter",
    ac_volts: float | None = None,
    rectifier_type: str | None = None,
    supply_voltage: float | None = None,
) -> tuple[str, str]:
    """(verdict, fallback): a signature and the plain verdict it sharpens, else (plain, "").

    The plain verdict is :func:`judge_supply`'s; absent, reversed and ok are
    never sharpened. **half_wave** needs a ``"rectified"`` source, a
    ``"bridge"`` rectifier, ``ac_volts`` and a low reading within
    :data:`~diagnose.physics.rectifier.PATTERN_TOLERANCE` of the half-wave
    mean; **coil_mismatch** needs ``supply_voltage`` outside the coil's band
    and the reading inside the band of ``supply_voltage``. half_wave is
    tried first.

    >>> judge_supply_signature(205, 103, (0.9, 1.1), source="rectified", ac_volts=230,
    ...                        rectifier_type="bridge")
    ('half_wave', 'low')
    >>> judge_supply_signature(96, 23.8, (0.9, 1.1), supply_voltage=24)
    ('coil_mismatch', 'low')
    >>> judge_supply_signature(24, 21.1, (0.9, 1.1), supply_voltage=24)
    ('low', '')

    References:
        Rashid, Power Electronics, diode rectifiers (textbook): half-wave
        mean ``sqrt(2)/pi * Vrms``. IEC 60204-1, 4.3.3 (from memory): the band.
    """
    plain = judge_supply(rated, volts, band, polarity_known)
    if plain not in ("low", "high"):
        return plain, ""
    if (plain == "low" and source == "rectified" and rectifier_type == "bridge"
            and ac_volts is not None and ac_volts > 0
            and abs(abs(volts) / expected_dc(ac_volts, "half-wave") - 1) <= PATTERN_TOLERANCE):
        return "half_wave", plain
    if (supply_voltage is not None and supply_voltage > 0
            and not _within(supply_voltage / rated, band)
            and _within(abs(volts) / supply_voltage, band)):
        return "coil_mismatch", plain
    return plain, ""


def _within(ratio: float, band: tuple[float, float]) -> bool:
    return not below(ratio, band[0]) and not above(ratio, band[1])


def _meaning(verdict: str, band: tuple[float, float], source: str, window: bool) -> str:
    allowed = f"allowed {band[0]:.0%} to {band[1]:.0%}" + (
        " (pack window)" if window else f" for a {source} supply")
    return {
        "absent": "no supply reaches the coil",
        "reversed": "polarity reversed",
        "low": f"low ({allowed})",
        "high": f"high ({allowed})",
        "ok": f"ok ({allowed})",
    }[verdict]


def _is_unknown(raw: Any) -> bool:
    return isinstance(raw, str) and raw.strip().lower() == "unknown"


def evaluate_supply(values: Mapping[str, Any]) -> Verdict:
    """Judge the DC volts measured at the coil terminals with the coil energised.

    Inputs: ``rated_voltage``, ``volts`` (may be negative), ``source``
    (converter, battery, rectified), optional ``window_low`` / ``window_high``
    (fractions of rated, a pack-defined window), ``polarity_known``; for
    the signatures (see the module), optional ``supply_voltage``,
    ``ac_volts`` and ``rectifier_type`` (half-wave or bridge), each of
    which may be "unknown".

    Raises:
        InputError: a window outside 0..5 or with low above high; a
            supply voltage or AC volts not above zero.

    References:
        IEC 60204-1, 4.3.3 (from memory); Rashid, Power Electronics, diode
        rectifiers (textbook).
    """
    values = {k: raw for k, raw in values.items()
              if not (k in SIGNATURE_INPUTS and _is_unknown(raw))}
    v = read_inputs("supply", values, positive=("rated_voltage", "supply_voltage", "ac_volts"),
                    negative=("volts",))
    for name in ("window_low", "window_high"):
        if v[name] is not None:
            require(0 < v[name] < 5, name, f"expected a fraction of rated such as 0.9 "
                                           f"(or 90 %), got {v[name]:g}")
    band = supply_band(v["source"], v["window_low"], v["window_high"])
    require(band[0] < band[1], "window_low",
            f"the window's low end {band[0]:g} is not below its high end {band[1]:g}")
    rated, volts = v["rated_voltage"], v["volts"]
    ac_volts, supply = v["ac_volts"], v["supply_voltage"]
    verdict, fallback = judge_supply_signature(
        rated, volts, band, v["polarity_known"], source=v["source"], ac_volts=ac_volts,
        rectifier_type=v["rectifier_type"], supply_voltage=supply)
    window = v["window_low"] is not None or v["window_high"] is not None
    rows: list[tuple[str, str, float | None, str]] = [
        ("measured", "measured at the coil", volts, "V"),
        ("rated", "rated voltage", rated, "V"),
        ("ratio", "share of rated", abs(volts) / rated * 100, "%"),
        ("band_low", "lowest allowed", band[0] * rated, "V"),
        ("band_high", "highest allowed", band[1] * rated, "V"),
    ]
    if ac_volts is not None:
        rows += [
            ("ac_volts", "AC volts at the rectifier input (rms)", ac_volts, "V"),
            ("half_wave_mean", "a half-wave rectifier gives", expected_dc(ac_volts, "half-wave"),
             "V"),
            ("bridge_mean", "a bridge rectifier gives", expected_dc(ac_volts, "bridge"), "V"),
        ]
    if supply is not None:
        rows += [
            ("supply_nominal", "the machine's supply (nominal)", supply, "V"),
            ("supply_ratio", "share of the supply's nominal", abs(volts) / supply * 100, "%"),
        ]
    plain = fallback or verdict
    summary = (f"{quantity_text(volts, 'V')} is {abs(volts) / rated:.0%} of rated "
               f"{quantity_text(rated, 'V')}: ")
    if verdict == "half_wave":
        assert ac_volts is not None
        summary += (f"{plain}; it looks like half-wave output behind a bridge rectifier: "
                    f"an open diode ({quantity_text(ac_volts, 'V')} AC gives "
                    f"{quantity_text(expected_dc(ac_volts, 'half-wave'), 'V')} half-wave, "
                    f"{quantity_text(expected_dc(ac_volts, 'bridge'), 'V')} through a bridge)")
    elif verdict == "coil_mismatch":
        assert supply is not None
        summary += (f"{plain}; it matches the machine's {quantity_text(supply, 'V')} supply, "
                    f"but the coil is labelled {quantity_text(rated, 'V')}: "
                    f"a coil for another voltage")
    else:
        summary += _meaning(verdict, band, v["source"], window)
    return Verdict("supply", verdict, make_figures(rows), summary, fallback=fallback,
                   unjudged=unjudged_signatures(verdict, v["source"], ac_volts,
                                                v["rectifier_type"], supply))


def unjudged_signatures(verdict: str, source: str, ac_volts: float | None,
                        rectifier_type: str | None, supply_voltage: float | None,
                        ) -> tuple[str, ...]:
    """The signatures a plain low/high verdict may hide, for want of an input.

    half_wave is possible only behind a rectifier that may be a bridge;
    coil_mismatch whenever the machine's supply voltage is not known.

    >>> unjudged_signatures("low", "rectified", None, "bridge", None)
    ('half_wave', 'coil_mismatch')
    >>> unjudged_signatures("low", "converter", None, None, 24.0)
    ()
    """
    if verdict not in ("low", "high"):
        return ()
    out = []
    if (verdict == "low" and source == "rectified" and rectifier_type in (None, "bridge")
            and (ac_volts is None or rectifier_type is None)):
        out.append("half_wave")
    if supply_voltage is None:
        out.append("coil_mismatch")
    return tuple(out)
