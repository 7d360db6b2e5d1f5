"""Annealed copper: resistivity, its temperature coefficient, the resistance method.

Pure functions on floats (ohm, degC), shared by the coil, cable and release
evaluators.

References:
    IEC 60028 (1925), International standard of resistance for copper:
    annealed copper at 20 degC has a resistivity of 1/58 ohm*mm2/m and a
    temperature coefficient of 0.00393 /K (100 % IACS).
    IEC 60034-1, clause 8.6.2.3.3 (from memory): winding temperature rise by
    the resistance method, with 235 for copper; IEEE Std 118 and ASTM B193
    use 234.5, the inverse of 1/0.00427 less 0.5 (the two differ by < 0.2 K
    in the range of a brake coil).
"""

from __future__ import annotations

#: Resistivity of annealed copper at 20 degC, ohm*mm2/m (IEC 60028).
RESISTIVITY_20 = 1 / 58
#: Temperature coefficient of resistance of annealed copper at 20 degC, 1/K (IEC 60028).
ALPHA_20 = 0.00393
#: The inferred zero-resistance temperature of copper used by IEC 60034-1, degC.
K_IEC = 235.0
#: The same constant as used by ASTM B193 / IEEE, degC.
K_ASTM = 234.5


def resistance_at(r20: float, temperature: float, alpha: float = ALPHA_20) -> float:
    """Resistance at ``temperature`` (degC) of a copper winding that has ``r20`` at 20 degC.

    >>> round(resistance_at(1.21, 75.0), 3)
    1.472
    """
    return r20 * (1 + alpha * (temperature - 20.0))


def winding_temperature(r_hot: float, r_cold: float, t_cold: float, k: float = K_IEC) -> float:
    """Mean winding temperature (degC) by the resistance method.

    ``theta2 = R2 / R1 * (k + theta1) - k`` with ``k`` = 235 for copper (IEC
    60034-1) or 234.5 (ASTM/IEEE).

    >>> round(winding_temperature(24.0, 20.0, 20.0), 1)
    71.0
    """
    return r_hot / r_cold * (k + t_cold) - k


def conductor_resistance(length_m: float, area_mm2: float, temperature: float = 20.0) -> float:
    """Resistance (ohm) of ``length_m`` of annealed copper of ``area_mm2`` at ``temperature``.

    >>> round(conductor_resistance(58.0, 1.0), 6)
    1.0
    """
    return resistance_at(RESISTIVITY_20 * length_m / area_mm2, temperature)
