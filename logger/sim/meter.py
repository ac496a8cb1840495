"""The simulated panel meter in time: its supply node stepped sample by sample through the circuit of
:class:`~logger.panel_meter.MeterCircuit` (the model the planner uses too).

Within a segment and a meter state the node is a first-order RC circuit: ``dV/dt = (V_th - V) / tau``
with ``V_th`` linear in the rail voltage. :class:`MeterNode` steps it exactly: over each sample interval
the rail is taken as a straight line (first-order hold) and the linear ODE is solved in closed form, an
exponential integrator that is stable at any step. Runs of samples in one segment are a first-order IIR
filter, run by :func:`scipy.signal.lfilter` in C; where the node leaves its segment or crosses a lockout
threshold, that one interval is split at the crossing (bisection on the closed form) and the rest of it is
solved in the new segment or state. The meter's switch times are therefore exact, not rounded to a sample.
State (node voltage, segment, meter state, filter state) is carried between calls, and the filter state is
handed over exactly, so the results do not depend on how the samples are split into blocks.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from logger.panel_meter import MeterCircuit

_MIN_WINDOW = 256
_MAX_WINDOW = 8192
_MAX_CROSSINGS = 16
_BISECTIONS = 52
_STEP_RTOL = 1e-9
"""Sample intervals within this relative difference share one set of filter coefficients..."""
_STEP_ULPS = 16
"""... or within this many float steps of the sample times: intervals taken between float seconds carry
rounding of the times themselves (about 1e-12 s at 3 h), which must not split a run of equal steps."""


@dataclass(frozen=True)
class Switch:
    """The meter switched off or on at ``t_s`` (true seconds), with the rail at ``rail_v``."""

    t_s: float
    on: bool
    rail_v: float


class MeterNode:
    """The meter's supply node in time: node voltage and meter state for a rail given sample by sample.

    Args:
        circuit: the circuit values.
    """

    def __init__(self, circuit: MeterCircuit) -> None:
        self.circuit = circuit
        self.switches: list[Switch] = []
        """Every switch so far, in time order."""
        self._started = False
        self._t = self._x = self._v = math.nan
        self._on = True
        self._k = 0
        self._h = math.nan
        self._zi: float | None = None
        self._window = _MIN_WINDOW
        self._coef: dict[tuple[bool, int, float], tuple[float, ...]] = {}
        self._bounds = {(on, k): self._limits(on, *circuit.bounds(k)) for on in (False, True) for k in range(3)}

    @property
    def on(self) -> bool:
        """Whether the meter is running now."""
        return self._on

    @property
    def node_v(self) -> float:
        """Node voltage at the last sample (NaN before the first)."""
        return self._v

    def start(self, t_s: float, rail_v: float, node_v: float | None = None, on: bool = True) -> None:
        """Set the state at the first sample; by default the steady state of the rail at that time."""
        c = self.circuit
        if node_v is None:
            node_v = c.equilibrium(rail_v, True)
            if node_v < c.off_v:
                on, node_v = False, min(c.equilibrium(rail_v, False), c.on_v)
        self._t, self._x, self._v, self._on = float(t_s), float(rail_v), float(node_v), on
        self._k = c.segment(node_v)
        self._zi = None
        self._started = True

    def advance(self, t_s: np.ndarray, rail_v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Node volts and meter state (running or not) at each sample, given the rail there.

        Args:
            t_s: sample times, increasing, after any given before.
            rail_v: rail voltage at those times.
        """
        t = np.asarray(t_s, dtype=np.float64)
        x = np.asarray(rail_v, dtype=np.float64)
        n = len(t)
        v_out, on_out = np.empty(n), np.empty(n, dtype=bool)
        i = 0
        if n and not self._started:
            self.start(t[0], x[0])
            v_out[0], on_out[0], i = self._v, self._on, 1
        h = np.diff(t, prepend=self._t if i == 0 else t[0])
        while i < n:
            j = min(n, i + self._window)
            tol = _step_tolerance(self._h, float(t[j - 1]))
            if not abs(h[i] - self._h) <= tol:
                self._h, self._zi = float(h[i]), None
                tol = _step_tolerance(self._h, float(t[j - 1]))
            other = np.flatnonzero(np.abs(h[i:j] - self._h) > tol)
            if other.size:
                j = i + int(other[0])
            i = self._run(t, x, i, j, v_out, on_out)
        return v_out, on_out

    # -- inside ------------------------------------------------------------------------------------

    def _limits(self, on: bool, lo: float, hi: float) -> tuple[float, bool, float, bool]:
        """Bounds of a segment and state, and whether each is a lockout threshold (a switch)."""
        c = self.circuit
        if on and c.off_v >= lo:
            return c.off_v, True, hi, False
        if not on and c.on_v <= hi:
            return lo, False, c.on_v, True
        return lo, False, hi, False

    def _coefficients(self, on: bool, k: int, h: float) -> tuple[float, ...]:
        key = (on, k, h)
        if key not in self._coef:
            v_from_one, tau = self.circuit.thevenin(on, k, 1.0)
            beta, _ = self.circuit.thevenin(on, k, 0.0)
            e, q = _hold_factors(h / tau)
            self._coef[key] = (v_from_one - beta, beta, e, 1.0 - q, q - e)
        return self._coef[key]

    def _run(self, t: np.ndarray, x: np.ndarray, i: int, j: int, v_out: np.ndarray, on_out: np.ndarray) -> int:
        """Filter samples ``i`` to ``j`` in the current segment; stop at the first that leaves it."""
        alpha, beta, e, c1, c0 = self._coefficients(self._on, self._k, self._h)
        xs = alpha * x[i:j] + beta
        if self._zi is None:
            self._zi = c0 * (alpha * self._x + beta) + e * self._v
        from scipy.signal import lfilter  # here, not at the top: only a simulated meter needs scipy (~60 MB)

        y, zf = lfilter((c1, c0), (1.0, -e), xs, zi=(self._zi,))
        lo, _, hi, _ = self._bounds[(self._on, self._k)]
        out = np.flatnonzero((y < lo) | (y > hi))
        m = int(out[0]) if out.size else j - i
        if m:
            v_out[i : i + m], on_out[i : i + m] = y[:m], self._on
            self._t, self._x, self._v = float(t[i + m - 1]), float(x[i + m - 1]), float(y[m - 1])
        if m == j - i:
            self._zi = float(zf[0])
            self._window = min(2 * self._window, _MAX_WINDOW)
            return j
        k = i + m
        self._v = self._cross(float(t[k]), float(x[k]))
        self._t, self._x, self._zi, self._window = float(t[k]), float(x[k]), None, _MIN_WINDOW
        v_out[k], on_out[k] = self._v, self._on
        return k + 1

    def _cross(self, t1: float, x1: float) -> float:
        """Step from the last sample to ``(t1, x1)``, splitting the interval where the node crosses a bound."""
        t0, xa, v = self._t, self._x, self._v
        done, span = 0.0, t1 - self._t
        v_end = v
        for _ in range(_MAX_CROSSINGS):
            rem = span - done
            line = self._line(xa, x1)
            v_end = _exact(v, line, rem, rem)
            lo, lo_switch, hi, hi_switch = self._bounds[(self._on, self._k)]
            if lo <= v_end <= hi or rem <= 0.0:
                return v_end
            upward = v_end > hi
            bound = hi if upward else lo
            s = _crossing(v, line, rem, bound, upward)
            done += s
            xa, v = xa + (x1 - xa) * (s / rem), bound
            if hi_switch if upward else lo_switch:
                self._on = not self._on
                self.switches.append(Switch(t0 + done, self._on, xa))
            else:
                self._k += 1 if upward else -1
        return v_end

    def _line(self, xa: float, xb: float) -> tuple[float, float, float]:
        """Thevenin voltage at both ends of an interval, and the time constant, in the current segment."""
        tha, tau = self.circuit.thevenin(self._on, self._k, xa)
        thb, _ = self.circuit.thevenin(self._on, self._k, xb)
        return tha, thb, tau


def _exact(v0: float, line: tuple[float, float, float], rem: float, s: float) -> float:
    """Node voltage ``s`` seconds into an interval of ``rem`` seconds over which the Thevenin voltage goes
    linearly from ``line[0]`` to ``line[1]`` (time constant ``line[2]``), starting from ``v0``."""
    if s <= 0.0:
        return v0
    tha, thb, tau = line
    th_s = tha + (thb - tha) * (s / rem)
    e, q = _hold_factors(s / tau)
    return e * v0 + (1.0 - q) * th_s + (q - e) * tha


def _crossing(v: float, line: tuple[float, float, float], rem: float, bound: float, upward: bool) -> float:
    """Time into the interval at which the node first passes ``bound``.

    With a steady rail the first-order response gives it in closed form, ``tau * ln((v - V_th) /
    (bound - V_th))``; with a moving rail, bisection on :func:`_exact` to 2^-52 of the interval.
    """
    tha, thb, tau = line
    if tha == thb and (bound - tha) * (v - tha) > 0:
        s = tau * math.log((v - tha) / (bound - tha))
        if 0.0 < s <= rem:
            return s
    inside, outside = 0.0, rem
    for _ in range(_BISECTIONS):
        mid = 0.5 * (inside + outside)
        vm = _exact(v, line, rem, mid)
        if (vm > bound) if upward else (vm < bound):
            outside = mid
        else:
            inside = mid
    return outside


def _step_tolerance(h: float, t_s: float) -> float:
    """How far a sample interval may differ from ``h`` and still share its filter coefficients."""
    return max(_STEP_RTOL * abs(h), _STEP_ULPS * math.ulp(t_s)) if math.isfinite(h) else 0.0


def _hold_factors(u: float) -> tuple[float, float]:
    """``exp(-u)`` and ``(1 - exp(-u)) / u`` for a step of ``u`` time constants (first-order hold)."""
    if u <= 0.0:
        return 1.0, 1.0
    return math.exp(-u), -math.expm1(-u) / u
