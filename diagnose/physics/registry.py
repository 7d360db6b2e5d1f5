"""The evaluator registry: names, inputs, verdicts. Imports no units library.

A pack's measurement check names an evaluator here and maps its inputs to
nameplate parameters or constants; the knowledge layer validates those
references (names, units, verdicts) against this table alone. The code of
each evaluator is imported only when :func:`evaluate` runs it.

Besides its plain verdicts an evaluator may declare *signatures*: sharper
verdicts that name a cause ("half-wave output behind a bridge: an open
diode") and that it can return only when the inputs a signature ``needs``
are given. :meth:`EvaluatorSpec.verdicts_for` lists the verdicts a check can
get from the inputs it maps; a signature's ``fallback`` is the plain verdict
it sharpens (None: whichever plain verdict the reading gets, given in
:attr:`~diagnose.physics.verdict.Verdict.fallback`).
"""

from __future__ import annotations

from dataclasses import dataclass
from importlib import import_module
from typing import Any, Iterable, Mapping

from diagnose.physics.verdict import Verdict


@dataclass(frozen=True)
class InputSpec:
    """One input of an evaluator.

    ``kind`` is "quantity" (a number with a unit; ``unit`` is the default
    unit, also used to check dimensions), "choice" (one of ``choices``) or
    "flag" (yes/no). ``many`` marks an input that takes several readings.
    """

    name: str
    help: str
    kind: str = "quantity"
    unit: str = ""
    required: bool = True
    default: Any = None
    choices: tuple[str, ...] = ()
    many: bool = False


@dataclass(frozen=True)
class Signature:
    """A sharper verdict an evaluator returns only when the inputs it ``needs`` are given.

    ``fallback`` is the plain verdict the signature sharpens, or None when
    it sharpens whichever plain verdict the reading gets (low or high, say);
    ``help`` says in plain words what the signature means.
    """

    name: str
    needs: tuple[str, ...]
    fallback: str | None
    help: str


@dataclass(frozen=True)
class EvaluatorSpec:
    """An evaluator: its inputs, which input a technician's reading fills, its verdicts.

    ``verdicts`` are the plain verdicts, which every use of the evaluator
    can get; ``signatures`` are the sharper ones that need more inputs.
    """

    name: str
    title: str
    inputs: tuple[InputSpec, ...]
    verdicts: tuple[str, ...]
    reading: str | None
    target: str  # "module:function" run by evaluate()
    signatures: tuple[Signature, ...] = ()

    def input(self, name: str) -> InputSpec | None:
        for spec in self.inputs:
            if spec.name == name:
                return spec
        return None

    def signature(self, name: str) -> Signature | None:
        """The signature called ``name``, or None when ``name`` is a plain verdict or unknown."""
        for sig in self.signatures:
            if sig.name == name:
                return sig
        return None

    def verdicts_for(self, given: Iterable[str]) -> tuple[str, ...]:
        """The verdicts a use that gives the inputs ``given`` can get: plain, then signatures.

        A signature counts when every input it needs is among ``given`` (the
        input names a pack's check maps, or the options typed to calc).

        >>> spec = EVALUATORS["supply"]
        >>> spec.verdicts_for(["rated_voltage", "supply_voltage"])[-1]
        'coil_mismatch'
        >>> spec.verdicts_for(["rated_voltage", "ac_volts"]) == spec.verdicts
        True
        """
        names = set(given)
        return self.verdicts + tuple(s.name for s in self.signatures
                                     if all(n in names for n in s.needs))

    @property
    def all_verdicts(self) -> tuple[str, ...]:
        """Every verdict the evaluator can return: the plain ones, then every signature."""
        return self.verdicts + tuple(s.name for s in self.signatures)


def _q(name: str, unit: str, help: str, required: bool = True, default: Any = None,
       many: bool = False) -> InputSpec:
    return InputSpec(name, help, "quantity", unit, required, default, (), many)


def _pull_inputs(pull_in: str, what: str) -> tuple[Any, ...]:
    """The inputs of the pull-in reckoning (``release`` and ``pull_in`` share them)."""
    return (
        _q("rated_voltage", "V", "rated coil voltage"),
        _q("volts", "V", "measured volts at the coil terminals"),
        _q("temperature", "degC", "coil temperature", required=False, default="20 degC"),
        _q("nominal_gap", "mm", "nominal air gap"),
        _q("gap", "mm", "measured mean air gap"),
        _q("pull_in", "", f"fraction of rated voltage that {pull_in}", required=False,
           default=0.7),
        _q("reserve", "", f"voltage reserve below which {what} counts as marginal, as a "
           "fraction", required=False, default=0.1),
    )


def _choice(name: str, choices: tuple[str, ...], help: str, default: str | None = None,
            required: bool | None = None) -> InputSpec:
    """A choice input; required when it has no default, unless ``required=False`` says otherwise."""
    return InputSpec(name, help, "choice", "", default is None if required is None else required,
                     default, choices)


def _flag(name: str, help: str, default: bool = False) -> InputSpec:
    return InputSpec(name, help, "flag", "", False, default)


_SPECS = (
    EvaluatorSpec(
        "coil", "Coil resistance against the nameplate",
        (
            _q("rated_voltage", "V", "rated coil voltage"),
            _q("rated_power", "W", "rated coil power at 20 degC", required=False),
            _q("rated_resistance", "ohm", "rated coil resistance at 20 degC (instead of power)",
               required=False),
            _q("ohms", "ohm", "measured resistance, leads disconnected (OL or inf for open)"),
            _q("temperature", "degC", "coil temperature when measured", required=False,
               default="20 degC"),
            _q("tolerance", "", "allowed deviation from the expected resistance, as a fraction",
               required=False, default=0.10),
            _q("reference_ohms", "ohm", "a cold reference reading, for the winding temperature",
               required=False),
            _q("reference_temperature", "degC", "temperature of the cold reference reading",
               required=False, default="20 degC"),
        ),
        ("open", "short", "low", "ok", "high"), "ohms", "diagnose.physics.coil:evaluate_coil",
    ),
    EvaluatorSpec(
        "supply", "Coil voltage at the terminals",
        (
            _q("rated_voltage", "V", "rated coil voltage"),
            _q("volts", "V", "measured DC volts at the coil terminals, coil energised"),
            _choice("source", ("converter", "battery", "rectified"),
                    "kind of DC source", default="converter"),
            _q("window_low", "", "lowest allowed fraction of rated (pack-defined window)",
               required=False),
            _q("window_high", "", "highest allowed fraction of rated (pack-defined window)",
               required=False),
            _flag("polarity_known", "the meter's + lead is on the coil's + terminal"),
            _q("supply_voltage", "V", "nominal voltage the machine's supply delivers to "
               "the coil (circuit diagram), when it may differ from the coil's label",
               required=False),
            _q("ac_volts", "V", "AC volts rms at the rectifier input, for a rectified supply",
               required=False),
            _choice("rectifier_type", ("half-wave", "bridge"),
                    "rectifier type, for a rectified supply", required=False),
        ),
        ("absent", "low", "ok", "high", "reversed"), "volts",
        "diagnose.physics.supply:evaluate_supply",
        (
            Signature("half_wave", ("ac_volts", "rectifier_type"), "low",
                      "on a rectified supply through a bridge, a low reading near "
                      "half-wave output: an open diode"),
            Signature("coil_mismatch", ("supply_voltage",), None,
                      "the reading matches the machine's supply but not the coil's label: "
                      "a coil for another voltage"),
        ),
    ),
    EvaluatorSpec(
        "off_voltage", "Coil volts with the coil commanded off",
        (
            _q("rated_voltage", "V", "rated coil voltage"),
            _q("volts", "V", "measured volts at the coil terminals, coil commanded off"),
            _q("off_share", "", "fraction of rated below which the coil counts as off",
               required=False, default=0.05),
            _q("present_share", "", "fraction of rated at or above which the supply is "
               "plainly on the coil", required=False, default=0.5),
        ),
        ("off", "residual", "present"), "volts",
        "diagnose.physics.offvoltage:evaluate_off_voltage",
    ),
    EvaluatorSpec(
        "rectifier", "Rectifier DC output against its AC supply",
        (
            _q("ac_volts", "V", "AC supply volts (rms) at the rectifier input"),
            _choice("type", ("half-wave", "bridge"), "rectifier type"),
            _q("measured_dc", "V", "measured mean DC volts at the rectifier output"),
        ),
        ("matches", "half_wave", "full_wave", "failed_diode", "no_output"), "measured_dc",
        "diagnose.physics.rectifier:evaluate_rectifier",
    ),
    EvaluatorSpec(
        "cable", "Voltage drop on the two-wire coil cable",
        (
            _q("current", "A", "coil current, taken as fixed", required=False),
            _q("rated_voltage", "V", "rated coil voltage (coil as a resistor)", required=False),
            _q("rated_power", "W", "rated coil power", required=False),
            _q("supply_volts", "V", "volts at the supply end (default: rated voltage)",
               required=False),
            _q("length", "m", "one-way cable length"),
            _q("area", "mm**2", "conductor cross-section"),
            _q("temperature", "degC", "conductor temperature", required=False, default="20 degC"),
            _choice("source", ("converter", "battery", "rectified"),
                    "kind of DC source, for the allowed band at the coil", default="converter"),
        ),
        ("ok", "too_much_drop"), None, "diagnose.physics.cable:evaluate_cable",
    ),
    EvaluatorSpec(
        "gap", "Air gap at three or more points",
        (
            _q("readings", "mm", "feeler-gauge readings around the circumference", many=True),
            _q("nominal", "mm", "nominal air gap when new"),
            _q("min", "mm", "smallest allowed gap", required=False),
            _q("max", "mm", "largest allowed gap (wear limit)"),
            _q("spread", "mm", "largest allowed difference between readings", required=False,
               default="0.5 mm"),
        ),
        ("ok", "too_small", "worn", "uneven"), "readings", "diagnose.physics.gap:evaluate_gap",
    ),
    EvaluatorSpec(
        "runout", "Total indicator runout over one turn",
        (
            _q("readings", "mm", "dial-indicator readings over one turn", many=True),
            _q("limit", "mm", "largest allowed total indicator runout"),
        ),
        ("ok", "out_of_tolerance"), "readings", "diagnose.physics.runout:evaluate_runout",
    ),
    EvaluatorSpec(
        "insulation", "Insulation resistance, coil to housing",
        (
            _q("megohms", "megaohm", "measured insulation resistance"),
            _q("test_volts", "V", "tester DC volts", required=False, default="500 V"),
            _q("temperature", "degC", "winding temperature", required=False, default="40 degC"),
            _q("minimum", "megaohm", "least acceptable resistance (IEC 60204-1: 1 Mohm)",
               required=False, default="1 megaohm"),
            _q("recommended", "megaohm", "recommended least resistance corrected to 40 degC "
               "(IEEE 43: 5 Mohm for windings below 1 kV)", required=False, default="5 megaohm"),
        ),
        ("ok", "low", "failed"), "megohms", "diagnose.physics.insulation:evaluate_insulation",
    ),
    EvaluatorSpec(
        "temperature", "Coil or housing temperature against its limit",
        (
            _q("temperature", "degC", "measured surface temperature"),
            _q("ambient", "degC", "ambient temperature", required=False, default="20 degC"),
            _q("limit", "degC", "highest allowed surface temperature", required=False,
               default="100 degC"),
            _q("hot_share", "", "share of the allowed rise (limit minus ambient) above which "
               "the surface counts as hot", required=False, default=0.8),
        ),
        ("ok", "hot", "over_limit"), "temperature",
        "diagnose.physics.temperature:evaluate_temperature",
    ),
    EvaluatorSpec(
        "pull_in", "First-order pull-in margin (any device, either sense)",
        _pull_inputs("pulls a cold armature in at the nominal gap", "the pull-in"),
        ("pulls_in", "marginal", "does_not_pull_in"), "volts",
        "diagnose.physics.release:evaluate_pull_in",
    ),
    EvaluatorSpec(
        "release", "First-order release margin (a spring-applied brake's words)",
        _pull_inputs("releases a cold brake at nominal gap", "the release"),
        ("releases", "marginal", "will_not_release"), "volts",
        "diagnose.physics.release:evaluate_release",
    ),
    EvaluatorSpec(
        "stop", "Dynamic stop: time, angle, heat",
        (
            _q("inertia", "kg*m**2", "total inertia on the brake shaft"),
            _q("speed", "rpm", "shaft speed at the start of the stop"),
            _q("torque", "N*m", "brake torque"),
            _q("load_torque", "N*m", "load torque", required=False, default="0 N*m"),
            _choice("load", ("opposes", "helps"), "load torque opposes or helps the stop",
                    default="opposes"),
            _q("mass", "kg", "mass that takes up the heat", required=False),
            _q("specific_heat", "J/(kg*K)", "specific heat of that mass", required=False,
               default="460 J/(kg*K)"),
            _q("rated_energy", "J", "rated energy per stop", required=False),
        ),
        ("within_rating", "over"), None, "diagnose.physics.stop:evaluate_stop",
    ),
    EvaluatorSpec(
        "holding", "Holding torque margin",
        (
            _q("load_torque", "N*m", "static load torque on the brake"),
            _q("rated_torque", "N*m", "rated holding torque"),
            _q("safety_factor", "", "required ratio of rated to load torque", required=False,
               default=2.0),
        ),
        ("ok", "insufficient"), "load_torque", "diagnose.physics.holding:evaluate_holding",
    ),
)

EVALUATORS: dict[str, EvaluatorSpec] = {spec.name: spec for spec in _SPECS}


def evaluate(name: str, values: Mapping[str, Any]) -> Verdict:
    """Run evaluator ``name`` on ``values`` (input name -> text, number or quantity).

    Raises:
        InputError: unknown evaluator, a missing, malformed or impossible input.
    """
    from diagnose.errors import InputError

    spec = EVALUATORS.get(name)
    if spec is None:
        raise InputError("evaluator", f"unknown evaluator {name!r}; known: {', '.join(EVALUATORS)}")
    module, func = spec.target.split(":")
    return getattr(import_module(module), func)(values)
