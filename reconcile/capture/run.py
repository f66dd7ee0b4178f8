"""A guided capture run: take the planned readings from instruments, store each at once.

:class:`Capture` walks the plan of :func:`instruments.plan.plan_readings`. For each
reading it routes the meter (a scanner channel, or a prompt to the operator), reads
until the value settles (:mod:`instruments.settle`), attaches the instrument's identity
(``*IDN?``) and a standard uncertainty, and commits the reading to the session store
before it moves on. Readings already in the session (same quantity and place) are
skipped, so an interrupted run resumes where it stopped by running it again (a gain
taken at another test frequency is another reading:
:func:`reconcile.inference.catalogue.reading_key`).

Uncertainty of a captured reading (one standard uncertainty, SI units)::

    u = sqrt(u_B² + u_A²)

- ``u_B`` from the instrument file's accuracy table: the limit ±(% of reading + % of
  range + floor) on the range the value falls in, read as a rectangular distribution,
  ``/√3`` (JCGM 100:2008 4.3.7; :mod:`reconcile.accuracy`). An instrument file with no
  table gives the documented defaults of :func:`reconcile.readings.default_uncertainty`.
- ``u_A`` the standard deviation of the mean of the settled window, ``s/√N`` (GUM
  4.2.3). A data sheet's accuracy usually covers short-term noise already, so this
  counts noise twice; it is small next to ``u_B`` on a quiet node and grows where the
  node is noisy, which is the case worth flagging. Deliberately conservative.

Gain is ``V_out/V_in`` from two AC rms readings (:func:`reconcile.derived_readings.
gain_from_ac`) and the input resistance comes from the series-resistor method
(:func:`reconcile.derived_readings.input_resistance_series_method`), both with
uncertainty propagated to first order. The two AC readings are taken as uncorrelated
(r = 0): for a ratio, a shared meter error with r > 0 would lower the uncertainty, so
r = 0 errs on the safe side.

Faults: any :class:`~reconcile.errors.InstrumentError` (no answer, garbage, an error
in the queue, a value that does not settle) stops the run. The generator output is
switched off and the scanner relay opened, and :class:`CaptureInterrupted` is raised:
its message names the resource and the command (from the original error), the reading
in flight, how many readings are safely stored, and that running again resumes.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable, Mapping, Sequence
from typing import TYPE_CHECKING, Any

from reconcile.model.board import GND, Board
from reconcile.errors import InputError, InstrumentError, ReconcileError
from reconcile.data.readings import DEFAULT_UNCERTAINTY, Reading
from reconcile.inference.catalogue import reading_key, taken_keys
from reconcile.model.values import format_si

from reconcile.capture.outcome import CaptureInterrupted, CaptureReport, LiveValue, TakenReading
from reconcile.capture.plan import (
    GENERATOR_SIDE,
    SKIP_ANSWERS,
    PlannedReading,
    ProbeStep,
    ac_probe_step,
    dc_probe_step,
    direct_setup_step,
    plan_readings,
    series_setup_step,
)
from reconcile.capture.meter_band import check_test_frequencies
from reconcile.capture.settle import Settled, SettleRule, settle

if TYPE_CHECKING:
    from reconcile.instruments.ac_voltmeter import AcVoltmeter
    from reconcile.instruments.dc_voltmeter import DcVoltmeter
    from reconcile.instruments.driver import Driver
    from reconcile.instruments.function_generator import FunctionGenerator
    from reconcile.instruments.power_supply import PowerSupply
    from reconcile.instruments.scanner import Scanner

__all__ = [
    "Capture",
    "CaptureReport",
    "CaptureInterrupted",
    "LiveValue",
    "TakenReading",
    "DEFAULT_SETTLE_COUNT",
    "DEFAULT_SETTLE_BAND_V",
    "DEFAULT_SETTLE_BAND_A",
    "DEFAULT_SETTLE_RELATIVE",
    "DEFAULT_MAX_SAMPLES",
    "DEFAULT_SIGNAL_VRMS",
    "CAPTURE_SOURCE",
]

DEFAULT_SETTLE_COUNT = 3
"""Consecutive values that must agree."""
DEFAULT_SETTLE_BAND_V = 1e-4
"""Absolute settle band for voltages, V (0.1 mV: a few counts of a 5½-digit meter on its
10 V range; common practice, widen it for a noisy node or hand-held probes)."""
DEFAULT_SETTLE_BAND_A = 1e-6
"""Absolute settle band for supply currents, A (1 µA)."""
DEFAULT_SETTLE_RELATIVE = 1e-4
"""Relative settle band (100 ppm of the reading), for large readings."""
DEFAULT_MAX_SAMPLES = 50
"""Values read at most before a reading is given up."""
DEFAULT_SIGNAL_VRMS = 0.01
"""Generator amplitude for the small-signal readings, V rms (10 mV: small enough that a
transistor stage stays linear — vbe swing well under the thermal voltage of 26 mV —
and large enough for an AC voltmeter's lower ranges)."""
CAPTURE_SOURCE = "capture"
"""The ``source`` recorded with every captured reading in the store."""

Prompt = Callable[[ProbeStep], "str | None"]
"""Asks the operator to do a step; returns what was typed (``s`` skips the reading)."""


class _Skip(Exception):
    """The operator skipped the reading at a prompt."""


def _identity_text(driver: Driver) -> str:
    return str(driver.identify())


class Capture:
    """A guided capture run on one board into one session.

    Parameters
    ----------
    board : Board
        The board as drawn; its file text must be the session's snapshot.
    store : reconcile.store.Store
        An open session store.
    session_id : str
        The session the readings go into.
    voltmeter : DcVoltmeter
        The DC voltmeter (node voltages).
    supply : PowerSupply or mapping, optional
        The bench supply whose read-back gives the supply current: one driver (the
        board has one supply) or ``{supply ref: driver}``. Without it the supply
        currents are skipped.
    scanner : Scanner, optional
        Routes the meter to the nodes by its instrument file's ``[channels]``; the run
        then asks for no probing (its ``reference_node`` must be gnd).
    ac_voltmeter, generator : optional
        For ``gain`` and ``input_resistance``.
    gain : bool
        Take the small-signal gain (V_out/V_in at the board's ``[signal]`` frequency).
    frequencies : sequence of float
        A gain sweep: the gain at each of these test frequencies (Hz) as well, the
        generator set to each in turn; each stored with its frequency.
    input_resistance : bool
        Take the input resistance by the series-resistor method.
    series_resistor_ohm, series_resistor_u_ohm : float, optional
        The series resistor's value and standard uncertainty, ohm (for
        ``input_resistance``; a 1 % part is u = 0.01·R/√3, GUM 4.3.7).
    signal_vrms : float
        Generator amplitude, V rms (set with ``VOLT:UNIT VRMS``).
    settle_count, settle_band_v, settle_band_a, settle_relative, max_samples
        The settle rule (:class:`instruments.settle.SettleRule`), per unit.
    sample_interval_s : float
        Wait between the values of one settle run, s.
    prompt : callable, optional
        ``prompt(step) -> str | None``: shows ``step.text`` and waits for the operator;
        an answer in :data:`instruments.plan.SKIP_ANSWERS` skips the reading. Needed
        unless a scanner reaches every point.
    show : callable, optional
        ``show(LiveValue)``: every value read and every reading stored.
    sleep : callable
        Waits a number of seconds (tests pass a recorder).
    plan : sequence of PlannedReading, optional
        Replaces :func:`plan_readings` (``gain`` and ``input_resistance`` then ignored).

    Raises
    ------
    InputError
        A missing instrument or option, a bad settle rule, a test frequency outside the
        AC meter's specified band (:mod:`reconcile.capture.meter_band`), or a scanner
        that cannot reach a planned node (checked before anything is sent).
    """

    def __init__(
        self,
        board: Board,
        store: Any,
        session_id: str,
        *,
        voltmeter: DcVoltmeter,
        supply: PowerSupply | Mapping[str, PowerSupply] | None = None,
        scanner: Scanner | None = None,
        ac_voltmeter: AcVoltmeter | None = None,
        generator: FunctionGenerator | None = None,
        gain: bool = False,
        frequencies: Sequence[float] = (),
        input_resistance: bool = False,
        series_resistor_ohm: float | None = None,
        series_resistor_u_ohm: float = 0.0,
        signal_vrms: float = DEFAULT_SIGNAL_VRMS,
        settle_count: int = DEFAULT_SETTLE_COUNT,
        settle_band_v: float = DEFAULT_SETTLE_BAND_V,
        settle_band_a: float = DEFAULT_SETTLE_BAND_A,
        settle_relative: float = DEFAULT_SETTLE_RELATIVE,
        max_samples: int = DEFAULT_MAX_SAMPLES,
        sample_interval_s: float = 0.0,
        prompt: Prompt | None = None,
        show: Callable[[LiveValue], None] | None = None,
        sleep: Callable[[float], None] = time.sleep,
        plan: Sequence[PlannedReading] | None = None,
    ) -> None:
        self.board = board
        self.store = store
        self.session_id = session_id.strip().upper()
        self.voltmeter = voltmeter
        self.supplies = self._supply_map(board, supply)
        self.scanner = scanner
        self.ac_voltmeter = ac_voltmeter
        self.generator = generator
        self.series_resistor_ohm = series_resistor_ohm
        self.series_resistor_u_ohm = float(series_resistor_u_ohm)
        self.signal_vrms = float(signal_vrms)
        self.rule_v = SettleRule(settle_count, settle_band_v, settle_relative, max_samples)
        self.rule_a = SettleRule(settle_count, settle_band_a, settle_relative, max_samples)
        if not (math.isfinite(sample_interval_s) and sample_interval_s >= 0):
            raise InputError(f"the sample interval must be >= 0 s, got {sample_interval_s!r}",
                             key="sample_interval_s")
        self.sample_interval_s = float(sample_interval_s)
        self.prompt = prompt
        self.show = show
        self.sleep = sleep
        self.plan: tuple[PlannedReading, ...] = tuple(
            plan if plan is not None
            else plan_readings(board, gain=gain, input_resistance=input_resistance,
                               frequencies=frequencies)
        )
        self._check_ready()
        self._identities: dict[str, str] = {}
        self._taken: list[TakenReading] = []
        self._skipped_existing: list[PlannedReading] = []
        self._skipped: list[tuple[PlannedReading, str]] = []
        self._generator_on = False
        self._generator_hz: float | None = None  # the frequency the sine is set to

    # ------------------------------------------------------------ checks
    @staticmethod
    def _supply_map(board: Board, supply: Any) -> dict[str, PowerSupply]:
        if supply is None:
            return {}
        if isinstance(supply, Mapping):
            unknown = [ref for ref in supply if ref not in board.supplies]
            if unknown:
                raise InputError(
                    f"supply {unknown[0]!r} is not on the board; its supplies are "
                    f"{', '.join(board.supplies)}", key="supply")
            return dict(supply)
        if len(board.supplies) != 1:
            raise InputError(
                f"the board has {len(board.supplies)} supplies ({', '.join(board.supplies)}): "
                "say which one the supply instrument feeds (REF=FILE)", key="supply")
        return {next(iter(board.supplies)): supply}

    def _needs(self, quantity: str) -> list[str]:
        missing = []
        if self.ac_voltmeter is None:
            missing.append("an AC voltmeter")
        if self.generator is None:
            missing.append("a function generator")
        if quantity == "input_resistance" and not (
            self.series_resistor_ohm is not None and self.series_resistor_ohm > 0
        ):
            missing.append("the series resistor's value")
        return missing

    def _check_ready(self) -> None:
        quantities = {p.quantity for p in self.plan}
        for quantity in ("gain", "input_resistance"):
            if quantity in quantities:
                missing = self._needs(quantity)
                if missing:
                    raise InputError(f"the {quantity.replace('_', ' ')} needs "
                                     f"{' and '.join(missing)}", key=quantity)
        if self.ac_voltmeter is not None:
            check_test_frequencies(self.board, self.plan, self.ac_voltmeter.profile)
        if not (math.isfinite(self.signal_vrms) and self.signal_vrms > 0):
            raise InputError(f"the signal amplitude must be > 0 V rms, got {self.signal_vrms!r}",
                             key="signal_vrms")
        if self.series_resistor_u_ohm < 0 or not math.isfinite(self.series_resistor_u_ohm):
            raise InputError("the series resistor's uncertainty must be >= 0 ohm",
                             key="series_resistor_u_ohm")
        hand_steps = "input_resistance" in quantities
        if self.scanner is not None:
            profile = self.scanner.profile
            if profile is None:
                raise InputError("a scanner needs its instrument file ([channels])",
                                 key="scanner")
            if profile.reference_node not in (GND, "0"):
                raise InputError(
                    f"the scanner's reference_node is {profile.reference_node!r}; a capture "
                    "reads every node against gnd, so clip the common lead on gnd and set "
                    "reference_node = \"gnd\"", path=profile.path, key="scanner.reference_node")
            missing = [p.at for p in self.plan if p.quantity == "voltage"
                       and not self._scanner_reaches(p.at)]
            if missing:
                raise InputError(
                    f"no scanner channel reads node{'s' if len(missing) > 1 else ''} "
                    f"{', '.join(missing)}; add them to [channels]", path=profile.path,
                    key="channels")
            signal = self.board.signal
            if "gain" in quantities and not all(
                self._scanner_reaches(n) for n in (signal.input, signal.output) if n
            ):
                hand_steps = True
        else:
            hand_steps = hand_steps or bool(
                quantities & {"voltage", "gain"})
        if hand_steps and self.prompt is None:
            raise InputError(
                "this capture needs the operator to place the probe, but no prompt was given "
                "(give a scanner whose [channels] reach every node, or a prompt)",
                key="prompt")

    def _scanner_reaches(self, node: str | None) -> bool:
        if self.scanner is None or self.scanner.profile is None or node is None:
            return False
        try:
            self.scanner.profile.channel_for(node)
        except InputError:
            return False
        return True

    # ------------------------------------------------------------ the run
    def run(self) -> CaptureReport:
        """Take every planned reading not yet in the session; store each at once.

        Returns
        -------
        CaptureReport

        Raises
        ------
        InputError
            The session does not exist, has ended, or holds another board.
        CaptureInterrupted
            An instrument failed (or a reading could not be worked out) mid-run; the
            readings taken before are stored and running again resumes.
        """
        snapshot = self.store.session_board(self.session_id)
        if (snapshot.source_text or "") != (self.board.source_text or ""):
            raise InputError(
                f"the board file differs from the board snapshot of session "
                f"{self.session_id}; capture into a session started on this board file",
                path=self.board.source_path, key="session")
        existing = taken_keys(self.board, [
            (s.reading.quantity, s.reading.at, s.reading.frequency)
            for s in self.store.readings(self.session_id)])
        self._taken, self._skipped_existing, self._skipped = [], [], []
        current: PlannedReading | None = None
        try:
            self._identify_all()
            for planned in self.plan:
                current = planned
                key = reading_key(*planned.key, signal_frequency=self.board.signal.frequency)
                if key in existing:
                    self._skipped_existing.append(planned)
                    continue
                reason = self._unavailable(planned)
                if reason:
                    self._skipped.append((planned, reason))
                    continue
                try:
                    reading, samples = self._take(planned)
                except _Skip:
                    self._skipped.append((planned, "skipped by the operator"))
                    continue
                reading_id = self.store.add_reading(
                    self.session_id, reading, source=CAPTURE_SOURCE)
                existing.add(key)
                self._taken.append(TakenReading(reading_id, reading, samples))
                self._tell(LiveValue(planned.label, reading.value, reading.unit, samples,
                                     True, stored=True, uncertainty=reading.uncertainty))
            current = None
        except (InstrumentError, InputError) as exc:
            problems = self._tidy()
            report = self._report(failed=current, error=str(exc))
            self._record(report)
            raise CaptureInterrupted(
                self._stop_message(exc, current, report, problems), report,
                exit_code=exc.exit_code,
            ) from exc
        except BaseException:
            self._tidy()
            raise
        problems = self._tidy()
        report = self._report()
        self._record(report)
        if problems:
            raise CaptureInterrupted(
                f"all {len(self._taken)} readings of this run are stored in session "
                f"{self.session_id}, but tidying up failed: {'; '.join(problems)}", report)
        return report

    def progress(self) -> CaptureReport:
        """What the run has done so far (for a caller interrupted by the operator)."""
        return self._report(failed=None, error="interrupted")

    def _report(self, failed: PlannedReading | None = None,
                error: str | None = None) -> CaptureReport:
        try:
            total = len(self.store.readings(self.session_id))
        except ReconcileError:
            total = -1
        return CaptureReport(
            session=self.session_id, taken=tuple(self._taken),
            skipped_existing=tuple(self._skipped_existing), skipped=tuple(self._skipped),
            failed=failed, error=error, stored_total=total, instruments=dict(self._identities),
        )

    def _record(self, report: CaptureReport) -> None:
        """Record the run with the session (analysis kind ``capture``), best effort."""
        try:
            from reconcile.data.digest import inputs_sha256

            board, readings = self.store.session_inputs(self.session_id)
            self.store.record_analysis(self.session_id, "capture", report.to_dict(),
                                       inputs_sha256=inputs_sha256(board, readings))
        except ReconcileError:
            pass  # the readings are what matters; a failed record must not hide them

    def _stop_message(self, exc: ReconcileError, current: PlannedReading | None,
                      report: CaptureReport, problems: list[str]) -> str:
        n = len(report.taken)
        where = f" at {current.label}" if current is not None else " before the first reading"
        total = f", {report.stored_total} in all" if report.stored_total >= 0 else ""
        also = f" (also: {'; '.join(problems)})" if problems else ""
        return (
            f"{exc}; capture stopped{where}: {n} reading{'' if n == 1 else 's'} of this run "
            f"{'is' if n == 1 else 'are'} safely stored in session {self.session_id}{total}; "
            f"run the same capture again to resume (readings already stored are skipped)"
            f"{also}"
        )

    def _tell(self, event: LiveValue) -> None:
        if self.show is not None:
            self.show(event)

    def _identify_all(self) -> None:
        """``*CLS`` then ``*IDN?`` on every instrument taking part (once per link)."""
        seen: dict[int, str] = {}
        roles: list[tuple[str, Driver]] = [("dc_voltmeter", self.voltmeter)]
        roles += [(f"power_supply {ref}", d) for ref, d in self.supplies.items()]
        quantities = {p.quantity for p in self.plan}
        if quantities & {"gain", "input_resistance"}:
            roles += [("ac_voltmeter", self.ac_voltmeter), ("function_generator", self.generator)]
        if self.scanner is not None:
            roles.append(("scanner", self.scanner))
        for role, driver in roles:
            if driver is None:
                continue
            key = id(driver.transport)
            if key not in seen:
                driver.clear()
                seen[key] = _identity_text(driver)
            self._identities[role] = seen[key]

    def _unavailable(self, planned: PlannedReading) -> str:
        if planned.quantity == "current" and planned.at not in self.supplies:
            return "no supply instrument for it"
        return ""

    def _ask(self, step: ProbeStep) -> None:
        if self.prompt is None:
            raise InputError(f"no prompt to ask the operator: {step.text}", key="prompt")
        answer = self.prompt(step)
        if answer is not None and answer.strip().lower() in SKIP_ANSWERS:
            raise _Skip

    def _settle(self, read: Callable[[], float], rule: SettleRule, label: str, unit: str,
                driver: Driver, command: str) -> Settled:
        def on_sample(value: float, n: int, settled: bool, spread: float | None,
                      band: float) -> None:
            self._tell(LiveValue(label, value, unit, n, settled, spread=spread, band=band))

        return settle(read, rule, what=label, unit=unit, resource=driver.resource,
                      command=command, on_sample=on_sample, sleep=self.sleep,
                      interval_s=self.sample_interval_s)

    # ------------------------------------------------------------ readings
    def _take(self, planned: PlannedReading) -> tuple[Reading, int]:
        if planned.quantity == "voltage":
            return self._voltage(planned)
        if planned.quantity == "current":
            return self._current(planned)
        if planned.quantity == "gain":
            return self._gain(planned.frequency)
        if planned.quantity == "input_resistance":
            return self._input_resistance()
        raise InputError(f"a capture cannot take {planned.label}", key="plan")

    def _voltage(self, planned: PlannedReading) -> tuple[Reading, int]:
        route = self._route_dc(planned.at)
        meter = self.voltmeter
        settled = self._settle(meter.read_dc_volts, self.rule_v, planned.label, "V", meter,
                               meter.command("read_dc_volts"))
        u, basis = _uncertainty(meter, "dc_volts", "voltage", settled)
        note = _note(settled, "V", basis, route)
        return Reading.from_si("voltage", planned.at, settled.value, u,
                       instrument=self._identities["dc_voltmeter"], note=note), settled.samples

    def _route_dc(self, node: str) -> str:
        if self.scanner is not None:
            channel = self.scanner.select(node)
            return f"scanner channel {channel}"
        self._ask(dc_probe_step(node))
        return ""

    def _current(self, planned: PlannedReading) -> tuple[Reading, int]:
        supply = self.supplies[planned.at]
        settled = self._settle(supply.read_current, self.rule_a, planned.label, "A", supply,
                               supply.command("read_current"))
        u, basis = _uncertainty(supply, "dc_current", "current", settled)
        note = _note(settled, "A", basis, "supply read-back")
        return Reading.from_si("current", planned.at, settled.value, u,
                       instrument=self._identities[f"power_supply {planned.at}"],
                       note=note), settled.samples

    def _generator_sine(self, frequency_hz: float | None = None) -> None:
        generator = self.generator
        if generator is None:  # checked in _check_ready
            raise InputError("no function generator", key="generator")
        f = self.board.signal.frequency if frequency_hz is None else float(frequency_hz)
        if self._generator_hz != f:
            generator.configure_sine(f, self.signal_vrms, "Vrms")
            self._generator_hz = f
        if not self._generator_on:
            generator.output_on()
            self._generator_on = True

    def _ac(self, point: str, label: str, what: str) -> Settled:
        if point != GENERATOR_SIDE and self._scanner_reaches(point):
            self.scanner.select(point)  # type: ignore[union-attr]
        else:
            if self.scanner is not None and self.scanner.closed_channel is not None:
                self.scanner.release()  # the meter leaves the scanner for the hand probe
            self._ask(ac_probe_step(point, what))
        meter = self.ac_voltmeter
        if meter is None:  # checked in _check_ready
            raise InputError("no AC voltmeter", key="ac_voltmeter")
        return self._settle(meter.read_ac_volts, self.rule_v, label, "V", meter,
                            meter.command("read_ac_volts"))

    def _ac_u(self, settled: Settled) -> tuple[float, str]:
        return _uncertainty(self.ac_voltmeter, "ac_volts", "voltage", settled)  # type: ignore[arg-type]

    def _signal_text(self) -> str:
        f = self.board.signal.frequency if self._generator_hz is None else self._generator_hz
        return (f"{format_si(f, 'Hz', 4)} sine, generator "
                f"{format_si(self.signal_vrms, 'V', 4)} rms")

    def _instruments_text(self) -> str:
        return (f"AC: {self._identities.get('ac_voltmeter', '?')}; generator: "
                f"{self._identities.get('function_generator', '?')}")

    def _gain(self, frequency_hz: float | None = None) -> tuple[Reading, int]:
        from reconcile.data.derived_readings import gain_from_ac

        signal = self.board.signal
        self._generator_sine(frequency_hz)
        at = "" if frequency_hz is None else f" at {format_si(frequency_hz, 'Hz', 4)}"
        v_in = self._ac(signal.input or "", f"gain{at}: V_in at node {signal.input}",
                        "board input")
        v_out = self._ac(signal.output or "", f"gain{at}: V_out at node {signal.output}",
                         "board output")
        u_in, _ = self._ac_u(v_in)
        u_out, _ = self._ac_u(v_out)
        derived = gain_from_ac(v_in.value, u_in, v_out.value, u_out, correlation=0.0)
        note = (f"capture: V_in {format_si(v_in.value, 'V', 5)} rms, V_out "
                f"{format_si(v_out.value, 'V', 5)} rms, {self._signal_text()}; uncorrelated")
        return (Reading.from_si("gain", "", derived.value, derived.uncertainty,
                        instrument=self._instruments_text(), note=note,
                        frequency=frequency_hz),
                v_in.samples + v_out.samples)

    def _input_resistance(self) -> tuple[Reading, int]:
        from reconcile.data.derived_readings import input_resistance_series_method

        signal = self.board.signal
        r_series = float(self.series_resistor_ohm or 0.0)
        self._generator_sine()
        self._ask(series_setup_step(r_series, signal.input or ""))
        try:
            v1 = self._ac(GENERATOR_SIDE, "input resistance: V1 at the generator side of "
                          "the series resistor", "V1")
            v2 = self._ac(signal.input or "", f"input resistance: V2 at node {signal.input}",
                          "V2, board input")
        finally:
            if self.prompt is not None:
                self.prompt(direct_setup_step(signal.input or ""))
        u1, _ = self._ac_u(v1)
        u2, _ = self._ac_u(v2)
        derived = input_resistance_series_method(
            v1.value, u1, v2.value, u2, r_series, self.series_resistor_u_ohm, correlation=0.0)
        note = (f"capture: series-resistor method, Rs {format_si(r_series, 'ohm', 5)}, V1 "
                f"{format_si(v1.value, 'V', 5)} rms, V2 {format_si(v2.value, 'V', 5)} rms, "
                f"{self._signal_text()}")
        return (Reading.from_si("input_resistance", "", derived.value, derived.uncertainty,
                        instrument=self._instruments_text(), note=note),
                v1.samples + v2.samples)

    # ------------------------------------------------------------ tidy up
    def _tidy(self) -> list[str]:
        """Generator output off, scanner relay open; problems returned, never raised."""
        problems: list[str] = []
        if self._generator_on and self.generator is not None:
            try:
                self.generator.output_off()
                self._generator_on = False
            except ReconcileError as exc:
                problems.append(f"switching the generator output off failed: {exc}")
        if self.scanner is not None and self.scanner.closed_channel is not None:
            try:
                self.scanner.release()
            except ReconcileError as exc:
                problems.append(f"opening scanner channel {self.scanner.closed_channel} "
                                f"failed: {exc}")
        return problems


def _uncertainty(driver: Driver, function: str, quantity: str,
                 settled: Settled) -> tuple[float, str]:
    """``sqrt(u_B² + u_A²)`` and a few words on where u_B came from."""
    value = settled.value
    table = driver.accuracy(function)
    if table is None:
        u_b = DEFAULT_UNCERTAINTY[quantity].standard(value)
        basis = "default accuracy (no table in the instrument file)"
    else:
        try:
            full_scale = table.select_range(value)
            u_b = table.standard_uncertainty(value, full_scale)
        except InputError as exc:
            where = f" in {driver.profile.path}" if driver.profile and driver.profile.path else ""
            raise InstrumentError(
                f"{driver.resource}: {exc.message} of [accuracy.{function}]{where}") from exc
        basis = f"accuracy on the {format_si(full_scale, table.unit, 4)} range"
    u = math.hypot(u_b, settled.type_a)
    if not u > 0:
        u = DEFAULT_UNCERTAINTY[quantity].standard(value) or 1e-12
        basis += "; zero, so the default"
    return u, basis


def _note(settled: Settled, unit: str, basis: str, route: str) -> str:
    via = f", via {route}" if route else ""
    return (f"capture: mean of {len(settled.window)} values settled within "
            f"{format_si(settled.band, unit, 3)} after {settled.samples}{via}; u from "
            f"{basis} and the spread")
