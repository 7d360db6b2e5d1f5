"""A first-order pull-in margin: will the coil pull the armature in?

Two evaluators share the model: ``pull_in`` speaks of the armature only
(pulls in / does not pull in), for any device, whichever way energising acts
on it: a spring-applied brake releases when it pulls in, a clutch or a
holding magnet that engages when energised engages; the pack says which in
the outcome titles of its check. ``release`` is the same reckoning in a
brake's words (releases / will not release), kept for the brake packs and
``diagnose calc release``.

The model. The pull across an air gap goes with the square of the
ampere-turns over the gap, ``F ~ (N*I / g)**2``; the current is the volts
over the hot resistance, ``I = V / R_T`` with ``R_T = R20 * (1 + 0.00393 *
(T - 20))``. The brake's ``pull_in`` fraction says that a cold coil (20 degC)
at the nominal gap releases at ``pull_in * V_rated``; that fixes the pull
the springs ask for. So the voltage needed to release is

    V_needed = pull_in * V_rated * (R_T / R20) * (g / g_nominal)

and the margin is the ratio of the pull available to the pull needed,
``margin = (V / V_needed) ** 2``. Verdicts:

* **will_not_release**: margin below 1;
* **marginal**: less than ``reserve`` (default 10 %, the size of the supply
  tolerance) of voltage to spare, a margin below ``(1 + reserve) ** 2``;
* **releases** otherwise.

Limits of the approximation (why it is first-order only):

* it ignores the iron: at small gaps the iron's reluctance and saturation
  dominate and the pull grows more slowly than ``1/g**2`` (the model is
  optimistic for gaps well below nominal);
* it ignores fringing and leakage flux, which grow with the gap;
* the springs are taken as a constant force; in fact, as the lining wears
  they extend and push a little less, which partly offsets the larger gap;
* it is a static balance: over-excitation circuits, coil inductance and the
  armature's motion are not modelled, nor the much smaller holding current
  once released;
* the pull-in fraction is a pack parameter from the maker or a test, and the
  result is only as good as it is.

Use it to compare the effect of the gap, the voltage and the coil
temperature together, not to certify a brake.

References:
    Roters, Electromagnetic Devices (1941), the pull of an air-gap magnet
    (F = B**2 A / (2 mu0), with B ~ mu0 N I / g).
    IEC 60028: annealed copper, alpha = 0.00393 /K.
"""

from __future__ import annotations

from typing import Any, Mapping

from diagnose.physics.copper import resistance_at
from diagnose.physics.inputs import read_inputs, require
from diagnose.physics.verdict import Verdict, make_figures, quantity_text


def needed_volts(rated: float, pull_in: float, temperature: float, gap: float,
                 nominal_gap: float) -> float:
    """The coil volts needed to release at ``temperature`` (degC) and ``gap``.

    >>> round(needed_volts(24, 0.7, 20, 0.25, 0.25), 6)
    16.8
    """
    return pull_in * rated * resistance_at(1.0, temperature) * (gap / nominal_gap)


def release_margin(volts: float, needed: float) -> float:
    """Pull available over pull needed: ``(volts / needed) ** 2``.

    >>> release_margin(24.0, 16.8) > 2
    True
    """
    return (abs(volts) / needed) ** 2


def judge_release(margin: float, reserve: float) -> str:
    """releases, marginal or will_not_release for a pull ``margin``."""
    if margin < 1:
        return "will_not_release"
    if margin < (1 + reserve) ** 2:
        return "marginal"
    return "releases"


_MEANING = {
    "releases": "releases with margin",
    "marginal": "marginal: a little more wear, heat or voltage loss stops the release",
    "will_not_release": "will not release",
}


_PULL = {
    "pulls_in": "pulls in with margin",
    "marginal": "marginal: a little more wear, heat or voltage loss and it does not pull in",
    "does_not_pull_in": "does not pull in",
}
_AS_PULL = {"releases": "pulls_in", "marginal": "marginal", "will_not_release": "does_not_pull_in"}


def evaluate_pull_in(values: Mapping[str, Any]) -> Verdict:
    """Estimate whether the coil pulls the armature in at the measured volts, heat and gap.

    The inputs and the reckoning of :func:`evaluate_release`; the verdicts
    ``pulls_in``, ``marginal`` and ``does_not_pull_in`` say nothing of what
    pulling in does to the device.

    >>> v = evaluate_pull_in({"rated_voltage": 24, "volts": 12, "nominal_gap": 0.3,
    ...                       "gap": 0.3})
    >>> v.verdict, v.summary.startswith("needs about 16.8 V to pull the armature in")
    ('does_not_pull_in', True)
    """
    brake = evaluate_release(values)
    verdict = _AS_PULL[brake.verdict]
    figures = dict(brake.figures)
    needed = figures["needed"]
    figures["needed"] = type(needed)(needed.label.replace("release", "pull in"), needed.value,
                                      needed.unit)
    head, _, tail = brake.summary.partition(" to release ")
    summary = f"{head} to pull the armature in {tail.rsplit(': ', 1)[0]}: {_PULL[verdict]}"
    return Verdict("pull_in", verdict, figures, summary)


def evaluate_release(values: Mapping[str, Any]) -> Verdict:
    """Estimate whether the brake releases at the measured volts, temperature and gap.

    Inputs: ``rated_voltage``, ``volts`` (at the coil terminals; sign
    ignored), ``temperature`` of the coil (default 20 degC), ``nominal_gap``,
    ``gap`` (measured mean), ``pull_in`` (default 0.7), ``reserve``
    (default 0.1).

    Raises:
        InputError: a zero gap; pull_in outside 0..1; a coil colder than
            copper's model allows.

    References:
        Roters, Electromagnetic Devices (pull across an air gap); IEC 60028.
    """
    v = read_inputs("release", values,
                    positive=("rated_voltage", "nominal_gap", "gap", "pull_in"),
                    negative=("volts", "temperature"))
    require(v["pull_in"] <= 1, "pull_in", "expected a fraction of rated voltage up to 1, "
                                          f"such as 0.7, got {v['pull_in']:g}")
    require(0 <= v["reserve"] < 1, "reserve", "expected a fraction such as 0.1")
    require(resistance_at(1.0, v["temperature"]) > 0, "temperature",
            f"{v['temperature']:g} degC is far below any working coil temperature")
    needed = needed_volts(v["rated_voltage"], v["pull_in"], v["temperature"], v["gap"],
                          v["nominal_gap"])
    margin = release_margin(v["volts"], needed)
    verdict = judge_release(margin, v["reserve"])
    figures = make_figures((
        ("volts", "volts at the coil", v["volts"], "V"),
        ("needed", "volts needed to release", needed, "V"),
        ("cold_pull_in", "pull-in volts, cold, nominal gap", v["pull_in"] * v["rated_voltage"],
         "V"),
        ("resistance_factor", "hot over cold resistance", resistance_at(1.0, v["temperature"]),
         ""),
        ("gap_factor", "gap over nominal", v["gap"] / v["nominal_gap"], ""),
        ("margin", "pull available over pull needed", margin, ""),
    ))
    summary = (f"needs about {quantity_text(needed, 'V')} to release at {v['temperature']:g} °C "
               f"and {v['gap'] / v['nominal_gap']:.2g} x the nominal gap; "
               f"{quantity_text(abs(v['volts']), 'V')} gives {margin:.2f} x the pull needed: "
               f"{_MEANING[verdict]}")
    return Verdict("release", verdict, figures, summary)
