"""Coil or housing surface temperature against its limit and the ambient.

* **over_limit**: above the highest allowed surface temperature;
* **hot**: the rise above ambient has used more than ``hot_share`` (default
  80 %) of the rise the limit allows (``limit - ambient``): not yet a fault,
  but little headroom is left for a warm day, frequent stops or a brake
  that drags while released;
* **ok** otherwise.

References:
    IEC 60085 (thermal classes of insulation, from memory) sets the limits
    a maker's surface limit is derived from; the 80 % share is this tool's
    choice (common practice for a warning threshold), not a standard's.
"""

from __future__ import annotations

from typing import Any, Mapping

from diagnose.physics import units
from diagnose.physics.inputs import read_inputs, require
from diagnose.physics.verdict import Verdict, make_figures, quantity_text


def judge_temperature(temperature: float, ambient: float, limit: float, hot_share: float) -> str:
    """ok, hot or over_limit.

    >>> judge_temperature(90, 20, 100, 0.8), judge_temperature(101, 20, 100, 0.8)
    ('hot', 'over_limit')
    """
    if units.above(temperature, limit):
        return "over_limit"
    if units.above(temperature - ambient, hot_share * (limit - ambient)):
        return "hot"
    return "ok"


def evaluate_temperature(values: Mapping[str, Any]) -> Verdict:
    """Judge a measured surface temperature.

    Inputs: ``temperature``, ``ambient`` (default 20 degC), ``limit``
    (default 100 degC), ``hot_share`` (default 0.8).

    Raises:
        InputError: a limit not above the ambient; a share outside 0..1.
    """
    v = read_inputs("temperature", values, negative=("temperature", "ambient", "limit"),
                    positive=("hot_share",))
    temp, ambient, limit = v["temperature"], v["ambient"], v["limit"]
    require(limit > ambient, "limit", "the limit must be above the ambient temperature")
    require(v["hot_share"] <= 1, "hot_share", "expected a fraction between 0 and 1 such as 0.8")
    verdict = judge_temperature(temp, ambient, limit, v["hot_share"])
    allowed = limit - ambient
    figures = make_figures((
        ("temperature", "measured", temp, "°C"),
        ("rise", "rise above ambient", temp - ambient, "K"),
        ("allowed_rise", "rise the limit allows", allowed, "K"),
        ("share", "share of the allowed rise", (temp - ambient) / allowed * 100, "%"),
        ("limit", "limit", limit, "°C"),
    ))
    meaning = {"ok": "ok", "hot": "hot (little headroom left)", "over_limit": "over the limit"}
    summary = (f"{quantity_text(temp, '°C')} is {quantity_text(temp - ambient, 'K')} above "
               f"ambient, {(temp - ambient) / allowed:.0%} of the rise the "
               f"{quantity_text(limit, '°C')} limit allows: {meaning[verdict]}")
    return Verdict("temperature", verdict, figures, summary)
