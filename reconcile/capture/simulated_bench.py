"""A simulated bench: instruments that answer with the engine's predictions for a hidden board.

:class:`SimulatedBench` builds :class:`~instruments.fake.FakeTransport` links for a
DMM (DC and AC volts), one bench supply per board supply, a function generator and a
relay scanner, and the role drivers on them. Their replies come from a hidden "true"
board:

- the DMM's DC reading is V(hi) − V(lo) predicted by the measurement model
  (:class:`reconcile.measure.MeasurementModel`, ``Observation('voltage', ...)``) *with the
  voltmeter attached* (the board's ``bench.voltmeter_ohms``), where hi/lo are set by the
  scanner's closed channel or, without one, by the simulated operator (:meth:`operator`,
  the ``prompt`` of a capture run, learns where the probe goes from each step);
- a supply's current read-back is the current it delivers into the true board;
- the AC reading follows the generator: with output on, a sine of ``A`` V rms
  (open-circuit) behind the board's ``signal.source_ohms``, the output node reads
  ``source_gain·A`` and the input node that over the gain, at the generator's frequency;
  with the series resistor of the series-resistor method in place, the input is taken
  as resistive, ``|Z_in|`` (what the method itself assumes):
  ``V2 = A·Z/(Rg+Rs+Z)`` and ``V1 = A·(Rs+Z)/(Rg+Rs+Z)``;
- every reading gets Gaussian noise of ``noise_fraction`` (default 0.1) times the
  standard uncertainty of the bench's own built-in accuracy tables (a quiet bench:
  noise well inside the data-sheet accuracy, as on a real meter);
- with ``calibration_error=True`` each instrument also has a fixed error on each range
  of each function, drawn once, uniformly inside the built-in accuracy limit: a gain
  error within ±(% of reading) and an offset within ±(% of range · range + floor).
  That is the rectangular reading of an accuracy limit (JCGM 100:2008 4.3.7) made
  real, so a fit's stated uncertainties are put to the test. Off by default: the
  instruments are then exact apart from noise.

The instrument files (profiles) of the simulated instruments are built in (invented
"Nullbench SIM-..." models) unless given; commands follow each profile's ``[commands]``
overrides, so a real instrument file can be tried against the simulation.

Faults for tests (:meth:`inject`): a query that times out, answers garbage or drifts
from its k-th occurrence on, or an error pushed into the ``SYST:ERR?`` queue by the k-th
matching write; :meth:`fix` clears them all. Command recognition, error queues and
faults live in :mod:`instruments.sim_instruments`; this module holds the physics.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable
from typing import TYPE_CHECKING, Any

import numpy as np

from reconcile.model.board import GND, Board
from reconcile.errors import InputError

from reconcile.instruments.ac_voltmeter import AcVoltmeter
from reconcile.instruments.dc_voltmeter import DcVoltmeter
from reconcile.instruments.fake import FakeTransport
from reconcile.instruments.function_generator import FunctionGenerator
from reconcile.capture.plan import GENERATOR_SIDE, ProbeStep
from reconcile.inference.catalogue import DC_BENCH, readings_one_could_take
from reconcile.instruments.power_supply import PowerSupply
from reconcile.instruments.profile import InstrumentProfile
from reconcile.instruments.scanner import Scanner
from reconcile.capture.sim_instruments import (
    DRIFT_V_PER_READING,
    FAULT_KINDS,
    INJECTED_ERROR,
    INSTRUMENTS,
    Fault,
    SimInstrument,
    sim_profile,
)

if TYPE_CHECKING:
    from reconcile.capture.run import CaptureReport, LiveValue

__all__ = [
    "SimulatedBench",
    "Fault",
    "FAULT_KINDS",
    "DRIFT_V_PER_READING",
    "INSTRUMENTS",
    "capture_simulated_demo",
    "sim_profile",
]

_NOT_A_NUMBER = "9.91E37"  # SCPI: no valid reading
_OPEN_INPUT_SD_V = 2e-6  # a DMM with nothing on its input reads a few µV


class SimulatedBench:
    """Instruments answering for a hidden true board (see the module docstring).

    Parameters
    ----------
    true_board : Board
        The board as really built (its values are the truth the readings come from).
    rng : numpy.random.Generator, optional
        Noise source (default: seeded with 0, so a run repeats).
    noise : bool
        Add Gaussian noise (default True).
    temperature_k : float, optional
        True junction temperature, K (default: the board's ambient).
    noise_fraction : float
        Noise standard deviation as a fraction of the built-in accuracy's standard
        uncertainty.
    calibration_error : bool
        Give every range a fixed error drawn within its accuracy limit (default False).
    probe_transient : float
        After each move of the probe, the first DC values are off by this fraction of
        the value, halving with each value (shows the settle rule at work; default 0).
    dmm_profile, supply_profile, generator_profile, scanner_profile : InstrumentProfile, optional
        Instrument files to use instead of the built-in ones (accuracy, command
        overrides, channels); the noise still follows the built-in tables.

    Attributes
    ----------
    voltmeter, ac_voltmeter : DcVoltmeter, AcVoltmeter
        Drivers on the DMM's one link.
    supplies : dict
        Supply ref -> :class:`PowerSupply`, one simulated supply per board supply.
    generator : FunctionGenerator
    scanner : Scanner
    transports : dict
        ``dmm``, ``generator``, ``scanner``, ``supply`` (first supply) and
        ``supply:REF`` -> :class:`FakeTransport` (every text sent is recorded there).
    prompts : list of ProbeStep
        Every step the simulated operator was given.
    faults : list of Fault
        Faults in force.
    """

    def __init__(
        self,
        true_board: Board,
        rng: np.random.Generator | None = None,
        *,
        noise: bool = True,
        temperature_k: float | None = None,
        noise_fraction: float = 0.1,
        calibration_error: bool = False,
        probe_transient: float = 0.0,
        dmm_profile: InstrumentProfile | None = None,
        supply_profile: InstrumentProfile | None = None,
        generator_profile: InstrumentProfile | None = None,
        scanner_profile: InstrumentProfile | None = None,
    ) -> None:
        self.true_board = true_board
        self.rng = rng if rng is not None else np.random.default_rng(0)
        self.noise = noise
        self.temperature_k = temperature_k
        self.noise_fraction = float(noise_fraction)
        self.probe_transient = float(probe_transient)
        self.calibration_error = bool(calibration_error)
        self._calibration: dict[tuple[str, str, float], tuple[float, float]] = {}
        self.faults: list[Fault] = []
        self.prompts: list[ProbeStep] = []
        self._dmm_table = sim_profile("dmm").accuracy
        self._supply_table = sim_profile("supply").accuracy
        self._dc_cache: dict[tuple[str, str], float] = {}
        self._ss_cache: dict[tuple[float, float], dict[str, float]] = {}
        self._hand: tuple[str, str] | None = None
        self._since_move = 0
        self._series_ohm: float | None = None
        self._closed: str | None = None
        self._gen = {"on": False, "frequency": true_board.signal.frequency, "amplitude": 0.0,
                     "unit": "VPP", "offset": 0.0}
        self._supply_state: dict[str, dict[str, float]] = {
            ref: {"volts": s.volts, "limit": 0.1, "on": 1.0}
            for ref, s in true_board.supplies.items()
        }
        self._prime()

        dmm_p = dmm_profile or sim_profile("dmm")
        gen_p = generator_profile or sim_profile("generator")
        scan_p = scanner_profile or sim_profile("scanner", true_board)
        sup_p = supply_profile or sim_profile("supply")
        self._instruments: dict[str, SimInstrument] = {
            "dmm": SimInstrument(self, "dmm", dmm_p, "Nullbench,SIM-DM1,SIM-D0001,1.0-sim",
                               dmm_p.resource),
            "generator": SimInstrument(self, "generator", gen_p,
                                     "Nullbench,SIM-FG1,SIM-G0001,1.0-sim", gen_p.resource),
            "scanner": SimInstrument(self, "scanner", scan_p,
                                   "Nullbench,SIM-SW1,SIM-S0001,1.0-sim", scan_p.resource),
        }
        self.transports: dict[str, FakeTransport] = {
            name: inst.transport for name, inst in self._instruments.items()
        }
        self.supplies: dict[str, PowerSupply] = {}
        for i, ref in enumerate(true_board.supplies):
            resource = sup_p.resource
            if len(true_board.supplies) > 1:
                resource = f"{sup_p.resource}-{ref}"
            inst = SimInstrument(self, f"supply:{ref}", sup_p,
                               f"Nullbench,SIM-PS1,SIM-P{i + 1:04d},1.0-sim", resource)
            self._instruments[f"supply:{ref}"] = inst
            self.transports[f"supply:{ref}"] = inst.transport
            if i == 0:
                self.transports["supply"] = inst.transport
            self.supplies[ref] = PowerSupply(inst.transport, sup_p)
        dmm = self.transports["dmm"]
        self.voltmeter = DcVoltmeter(dmm, dmm_p if "dc_voltmeter" in dmm_p.roles else None)
        self.ac_voltmeter = AcVoltmeter(dmm, dmm_p if "ac_voltmeter" in dmm_p.roles else None)
        self.generator = FunctionGenerator(self.transports["generator"], gen_p)
        self.scanner = Scanner(self.transports["scanner"], scan_p, sleep=lambda _s: None)

    # ------------------------------------------------------------ faults
    def inject(self, instrument: str, kind: str, *, after: int = 1,
               command: str | None = None) -> Fault:
        """Make ``instrument`` fail (see :class:`Fault`); returns the fault.

        ``instrument`` is one of :data:`INSTRUMENTS` (``supply`` is the first supply;
        ``supply:REF`` a given one).

        Raises
        ------
        InputError
            Unknown instrument or kind, or ``after`` < 1.
        """
        name = instrument
        if name == "supply":
            name = f"supply:{next(iter(self.true_board.supplies))}"
        if name not in self._instruments:
            raise InputError(f"no simulated instrument {instrument!r}; one of "
                             f"{', '.join(INSTRUMENTS)}", key="instrument")
        if kind not in FAULT_KINDS:
            raise InputError(f"unknown fault {kind!r}; one of {', '.join(FAULT_KINDS)}",
                             key="kind")
        if isinstance(after, bool) or not isinstance(after, int) or after < 1:
            raise InputError(f"after must be a whole number >= 1, got {after!r}", key="after")
        fault = Fault(name, kind, after, command)
        self.faults.append(fault)
        return fault

    def fix(self) -> None:
        """Clear every injected fault (the instrument is repaired, the cable plugged in)."""
        self.faults.clear()

    # ------------------------------------------------------------ the operator
    def operator(self, step: ProbeStep) -> str:
        """A simulated operator: does what ``step`` says and presses Enter.

        Use as the ``prompt`` of a capture run.
        """
        self.prompts.append(step)
        if step.kind == "setup":
            self._series_ohm = step.series_ohm
        else:
            self._move((step.hi, step.lo))
        return ""

    def capture_kwargs(self, *, scanner: bool = False, gain: bool = False) -> dict[str, Any]:
        """Keyword arguments for :class:`instruments.capture.Capture` on this bench."""
        out: dict[str, Any] = {"voltmeter": self.voltmeter, "supply": dict(self.supplies),
                               "prompt": self.operator, "sleep": lambda _s: None}
        if scanner:
            out["scanner"] = self.scanner
        if gain:
            out.update(ac_voltmeter=self.ac_voltmeter, generator=self.generator)
        return out

    # ------------------------------------------------------------ predictions
    def _predict(self, board: Board, observations: list[Any]) -> np.ndarray:
        from reconcile.engine import solve_batch
        from reconcile.inference.measure import MeasurementModel

        model = MeasurementModel(board, observations)
        x = model.space.prior_mean[None, :]
        if self.temperature_k is None:
            return model.predict(x)[0]
        params = model.parameters(x)
        params = params.with_values(temperature=np.full(params.n_samples, self.temperature_k))
        return model.predict(x, solution=solve_batch(model.circuit, params))[0]

    def _prime(self) -> None:
        """Every reading of the DC bench (node voltages, supply currents) of the true
        board, from the catalogue, in one engine call."""
        from reconcile.inference.measure import Observation

        entries = readings_one_could_take(self.true_board, bench=DC_BENCH)
        obs = [Observation(e.quantity, e.at, 0.0, 1.0) for e in entries]
        values = self._predict(self.true_board, obs)
        self._currents = {}
        for entry, value in zip(entries, values, strict=True):
            if entry.quantity == "voltage":
                self._dc_cache[(entry.at, GND)] = float(value)
            else:  # a supply's read-back
                self._currents[entry.at] = float(value)

    def dc_voltage(self, hi: str, lo: str = GND) -> float:
        """V(hi) − V(lo) of the true board with the voltmeter across them (no noise), V."""
        key = (hi, lo)
        if key not in self._dc_cache:
            from reconcile.inference.measure import Observation

            known = {*self.true_board.nodes, GND}
            if hi not in known or lo not in known or hi == lo:
                return math.nan
            at = hi if lo == GND else f"{hi}/{lo}"
            self._dc_cache[key] = float(
                self._predict(self.true_board, [Observation("voltage", at, 0.0, 1.0)])[0])
        return self._dc_cache[key]

    def small_signal(self, frequency_hz: float | None = None,
                     source_ohms: float | None = None) -> dict[str, float]:
        """gain, source_gain, input_resistance of the true board (no noise)."""
        signal = self.true_board.signal
        f = signal.frequency if frequency_hz is None else float(frequency_hz)
        rg = signal.source_ohms if source_ohms is None else float(source_ohms)
        key = (f, rg)
        if key not in self._ss_cache:
            from reconcile.inference.measure import Observation

            board = dataclasses.replace(
                self.true_board, signal=dataclasses.replace(signal, frequency=f, source_ohms=rg))
            names = ("gain", "source_gain", "input_resistance")
            values = self._predict(board, [Observation(q, "", 0.0, 1.0) for q in names])
            self._ss_cache[key] = {q: float(v) for q, v in zip(names, values, strict=True)}
        return self._ss_cache[key]

    def _noisy(self, value: float, table: Any, instrument: str = "",
               function: str = "") -> float:
        """``value`` as the instrument reads it: calibration error (if on), then noise."""
        if not math.isfinite(value):
            return value
        try:
            full_scale = table.select_range(value)
        except InputError:
            full_scale = table.full_scales[-1]
        if self.calibration_error and instrument:
            key = (instrument, function, full_scale)
            if key not in self._calibration:
                spec = table.spec_for(full_scale)
                gain = spec.percent_of_reading / 100.0 * float(self.rng.uniform(-1, 1))
                offset = (spec.percent_of_range / 100.0 * full_scale + spec.floor) * float(
                    self.rng.uniform(-1, 1))
                self._calibration[key] = (gain, offset)
            gain, offset = self._calibration[key]
            value = value * (1.0 + gain) + offset
        if not self.noise:
            return value
        u = table.standard_uncertainty(min(abs(value), full_scale), full_scale)
        return value + self.noise_fraction * u * float(self.rng.standard_normal())

    # ------------------------------------------------------------ state and replies
    def _move(self, probe: tuple[str, str] | None) -> None:
        if probe != self._hand:
            self._hand = probe
            self._since_move = 0

    def _probe(self) -> tuple[str, str] | None:
        if self._closed is not None:
            where = self._instruments["scanner"].profile.channels.get(self._closed)
            if where is None:
                return None
            hi, _, lo = where.partition("/")
            return (hi, lo or self._instruments["scanner"].profile.reference_node)
        return self._hand

    def _amplitude_vrms(self) -> float:
        gen = self._gen
        if gen["unit"] == "VRMS":
            return float(gen["amplitude"])
        return float(gen["amplitude"]) / (2.0 * math.sqrt(2.0))

    def _ac_value(self, point: str) -> float:
        signal = self.true_board.signal
        if not self._gen["on"]:
            return abs(1e-5 * float(self.rng.standard_normal())) if self.noise else 0.0
        a = self._amplitude_vrms()
        f = float(self._gen["frequency"])
        ss = self.small_signal(f)
        if self._series_ohm is None:
            v_out = ss["source_gain"] * a
            values = {signal.input: v_out / ss["gain"], signal.output: v_out}
        else:
            rs, rg, z = self._series_ohm, signal.source_ohms, ss["input_resistance"]
            v2 = a * z / (rg + rs + z)
            values = {signal.input: v2, GENERATOR_SIDE: a * (rs + z) / (rg + rs + z),
                      signal.output: v2 * ss["gain"]}
        return values.get(point, math.nan)

    def _number(self, value: float) -> str:
        return _NOT_A_NUMBER if not math.isfinite(value) else f"{value:+.9E}"

    def _answer(self, name: str, action: str, fields: dict[str, str]) -> str | None:
        if name == "dmm":
            probe = self._probe()
            if action in ("read_dc_volts", "read_dc_volts_range"):
                if probe is None:
                    sd = _OPEN_INPUT_SD_V if self.noise else 0.0
                    return self._number(sd * float(self.rng.standard_normal()))
                value = self.dc_voltage(*probe)
                if self.probe_transient and math.isfinite(value):
                    value *= 1.0 + self.probe_transient * 0.5 ** self._since_move
                self._since_move += 1
                table = self._dmm_table["dc_volts"]
                return self._number(self._noisy(value, table, name, "dc_volts"))
            if action in ("read_ac_volts", "read_ac_volts_range"):
                if probe is None:
                    return self._number(0.0)
                value = self._ac_value(probe[0])
                table = self._dmm_table["ac_volts"]
                return self._number(abs(self._noisy(value, table, name, "ac_volts")))
            return None
        if name.startswith("supply:"):
            ref = name.split(":", 1)[1]
            state = self._supply_state[ref]
            if action == "read_current":
                return self._number(self._noisy(self._currents[ref],
                                                self._supply_table["dc_current"], name,
                                                "dc_current"))
            if action == "read_voltage":
                return self._number(self._noisy(self.true_board.supplies[ref].volts,
                                                self._supply_table["dc_volts"], name,
                                                "dc_volts"))
            if action == "read_voltage_setting":
                return self._number(state["volts"])
            if action == "read_current_limit":
                return self._number(state["limit"])
            if action == "read_output":
                return "1" if state["on"] else "0"
            return None
        if name == "generator":
            if action == "read_frequency":
                return self._number(float(self._gen["frequency"]))
            if action == "read_output":
                return "1" if self._gen["on"] else "0"
            return None
        if name == "scanner" and action == "read_closed":
            return "1" if fields.get("channel") == self._closed else "0"
        return None

    def _apply(self, name: str, action: str, fields: dict[str, str]) -> str | None:
        """Apply a setting; returns an error-queue entry if the setting is refused."""
        value = _float(fields.get("value"))
        if name == "generator":
            gen = self._gen
            if action == "set_frequency" and value is not None and value > 0:
                gen["frequency"] = value
            elif action == "set_amplitude" and value is not None and value > 0:
                gen["amplitude"] = value
            elif action == "set_offset" and value is not None:
                gen["offset"] = value
            elif action == "set_amplitude_unit_vpp":
                gen["unit"] = "VPP"
            elif action == "set_amplitude_unit_vrms":
                gen["unit"] = "VRMS"
            elif action in ("output_on", "output_off"):
                gen["on"] = action == "output_on"
            elif action != "set_function_sine":
                return INJECTED_ERROR
            return None
        if name == "scanner":
            channels = self._instruments["scanner"].profile.channels
            ids = [c.strip() for c in fields.get("channel", "").split(",")]
            if any(c not in channels for c in ids):
                return '-222,"Channel out of range"'
            if action == "close_channel":
                if self._closed != ids[0]:
                    self._since_move = 0
                self._closed = ids[0]
            elif action == "open_channel" and self._closed in ids:
                self._closed = None
            return None
        if name.startswith("supply:"):
            state = self._supply_state[name.split(":", 1)[1]]
            if action == "set_voltage" and value is not None:
                state["volts"] = value
            elif action == "set_current_limit" and value is not None:
                state["limit"] = value
            elif action in ("output_on", "output_off"):
                state["on"] = 1.0 if action == "output_on" else 0.0
            return None
        return None


def _float(text: str | None) -> float | None:
    if text is None:
        return None
    try:
        return float(text)
    except ValueError:
        return None


def capture_simulated_demo(
    board: Board,
    true_board: Board,
    store: Any,
    session_id: str,
    rng: np.random.Generator | None = None,
    *,
    scanner: bool = True,
    gain: bool = True,
    input_resistance: bool = True,
    series_resistor_ohm: float | None = None,
    series_tolerance: float = 0.001,
    temperature_k: float | None = None,
    show: Callable[[LiveValue], None] | None = None,
) -> CaptureReport:
    """Capture ``board``'s readings from a simulated bench built on ``true_board``.

    For the demo: a scanner routes the DMM to every node (no prompts), the supply's
    read-back gives its current, and with a ``[signal]`` table the gain and the input
    resistance are taken too (the series resistor is put in by the simulated operator).

    Parameters
    ----------
    board : Board
        The board as drawn (the session's board).
    true_board : Board
        The hidden board as built.
    store : reconcile.store.Store
        An open store holding ``session_id``.
    session_id : str
        The session the readings go into.
    rng : numpy.random.Generator, optional
        Noise source.
    scanner, gain, input_resistance : bool
        What to use and take (gain and input resistance only with ``[signal]``).
    series_resistor_ohm : float, optional
        The series resistor of the input-resistance reading, ohm (default: the spec's
        input resistance, else 1 kΩ: the method is most precise with Rs near R_in).
    series_tolerance : float
        Its tolerance, read as rectangular: u = tolerance·R/√3 (GUM 4.3.7).
    temperature_k : float, optional
        True junction temperature, K.
    show : callable, optional
        Told of every value (see :class:`instruments.capture.LiveValue`).

    Returns
    -------
    CaptureReport
    """
    from reconcile.capture.run import Capture
    from reconcile.data.derived_readings import series_resistor_uncertainty

    if series_resistor_ohm is None:
        target = board.spec.targets.get("input_resistance")
        series_resistor_ohm = target.value if target is not None else 1000.0
    bench = SimulatedBench(true_board, rng, temperature_k=temperature_k)
    has_signal = board.signal.input is not None and board.signal.output is not None
    kwargs = bench.capture_kwargs(scanner=scanner, gain=has_signal and (gain or input_resistance))
    capture = Capture(
        board, store, session_id,
        gain=gain and has_signal,
        input_resistance=input_resistance and has_signal,
        series_resistor_ohm=series_resistor_ohm,
        series_resistor_u_ohm=series_resistor_uncertainty(series_resistor_ohm, series_tolerance),
        show=show,
        **kwargs,
    )
    return capture.run()
