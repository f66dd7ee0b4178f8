"""Open the instruments a capture run uses, from their instrument files, real or simulated.

:func:`open_bench` reads the instrument files, opens each instrument once through
pyvisa (two roles of one instrument — a DMM's DC and AC volts — share one link), and
returns the role drivers in a :class:`Bench`. :func:`simulated_bench` builds the same
from a :class:`~instruments.simulated_bench.SimulatedBench` answering for a hidden
board; instrument files given there only lend their accuracy tables, command overrides
and channel map. Either way, close the bench when done.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

from reconcile.model.board import Board
from reconcile.errors import InputError

from reconcile.capture.meter_band import check_test_frequencies
from reconcile.capture.plan import PlannedReading

from reconcile.instruments.ac_voltmeter import AcVoltmeter
from reconcile.instruments.dc_voltmeter import DcVoltmeter
from reconcile.instruments.function_generator import FunctionGenerator
from reconcile.instruments.power_supply import PowerSupply
from reconcile.instruments.profile import InstrumentProfile, load_profile
from reconcile.instruments.scanner import Scanner

__all__ = ["Bench", "open_bench", "simulated_bench", "parse_supply_options"]

PathLike = str | os.PathLike[str]


@dataclass
class Bench:
    """The drivers of one capture run and the links to close afterwards.

    Attributes
    ----------
    voltmeter : DcVoltmeter
    supplies : dict
        Supply ref -> :class:`PowerSupply` (may be empty).
    scanner, ac_voltmeter, generator : optional
    prompt : callable or None
        The simulated operator (simulated benches only).
    links : list
        Transports to close.
    """

    voltmeter: DcVoltmeter
    supplies: dict[str, PowerSupply] = field(default_factory=dict)
    scanner: Scanner | None = None
    ac_voltmeter: AcVoltmeter | None = None
    generator: FunctionGenerator | None = None
    prompt: Callable[[Any], str | None] | None = None
    links: list[Any] = field(default_factory=list)

    def close(self) -> None:
        """Close every link (errors on close are ignored: the readings are stored)."""
        from reconcile.errors import ReconcileError
        from reconcile.instruments.transport import visa_failures

        for link in self.links:
            try:
                link.close()
            except (ReconcileError, *visa_failures()):  # closing must not hide what went before
                pass
        self.links.clear()

    def __enter__(self) -> Bench:
        return self

    def __exit__(self, *_exc: object) -> None:
        self.close()


def parse_supply_options(options: Sequence[str], board: Board) -> dict[str, str]:
    """``--supply`` values, ``FILE`` or ``REF=FILE``, as ``{supply ref: file}``.

    A bare ``FILE`` names the board's only supply.

    Raises
    ------
    InputError
        A bare file on a board with several supplies, an unknown ref, a ref given twice.
    """
    out: dict[str, str] = {}
    for text in options:
        ref, sep, path = text.partition("=")
        if not sep:
            path = text
            if len(board.supplies) != 1:
                raise InputError(
                    f"the board has supplies {', '.join(board.supplies)}: write "
                    f"--supply REF=FILE (e.g. {next(iter(board.supplies))}={text})",
                    key="--supply")
            ref = next(iter(board.supplies))
        ref = ref.strip()
        if ref not in board.supplies:
            raise InputError(f"--supply {text!r}: {ref!r} is not a supply of the board; its "
                             f"supplies are {', '.join(board.supplies)}", key="--supply")
        if ref in out:
            raise InputError(f"--supply gives supply {ref} twice", key="--supply")
        out[ref] = path.strip()
    return out


def _load(path: PathLike | None, role: str, option: str) -> InstrumentProfile | None:
    if path is None:
        return None
    profile = load_profile(path)
    if role not in profile.roles:
        raise InputError(
            f"{option} needs an instrument with role {role!r}; this file's roles are "
            f"{', '.join(profile.roles)}", path=os.fspath(path), key="instrument.role")
    return profile


def open_bench(
    *,
    dmm: PathLike | None,
    supplies: dict[str, PathLike] | None = None,
    scanner: PathLike | None = None,
    ac_meter: PathLike | None = None,
    generator: PathLike | None = None,
    board: Board | None = None,
    plan: Sequence[PlannedReading] = (),
) -> Bench:
    """Open the instruments named by their files (through pyvisa).

    ``ac_meter`` defaults to the DMM when its file lists the ``ac_voltmeter`` role.
    With ``board`` and ``plan``, the plan's test frequencies are held to the AC meter's
    specified band before any instrument is opened
    (:func:`~reconcile.capture.meter_band.check_test_frequencies`).

    Raises
    ------
    InputError
        A file is missing, wrong, or of the wrong role; a test frequency outside the AC
        meter's band.
    InstrumentError
        An instrument cannot be opened (links opened before it are closed).
    """
    dmm_p = _load(dmm, "dc_voltmeter", "--dmm")
    if dmm_p is None:
        raise InputError("a capture needs a DC voltmeter: give --dmm FILE", key="--dmm")
    ac_p = _load(ac_meter, "ac_voltmeter", "--ac-meter")
    if ac_p is None and "ac_voltmeter" in dmm_p.roles:
        ac_p = dmm_p
    gen_p = _load(generator, "function_generator", "--generator")
    scan_p = _load(scanner, "scanner", "--scanner")
    supply_p = {ref: _load(path, "power_supply", "--supply")
                for ref, path in (supplies or {}).items()}
    if board is not None:
        check_test_frequencies(board, plan, ac_p)
    opened: dict[tuple[str, str], Any] = {}
    bench_links: list[Any] = []

    def link(profile: InstrumentProfile) -> Any:
        key = (profile.resource, profile.backend)
        if key not in opened:
            opened[key] = profile.open()
            bench_links.append(opened[key])
        return opened[key]

    try:
        voltmeter = DcVoltmeter(link(dmm_p), dmm_p)
        bench = Bench(voltmeter, links=bench_links)
        for ref, profile in supply_p.items():
            bench.supplies[ref] = PowerSupply(link(profile), profile)  # type: ignore[arg-type]
        if ac_p is not None:
            bench.ac_voltmeter = AcVoltmeter(link(ac_p), ac_p)
        if gen_p is not None:
            bench.generator = FunctionGenerator(link(gen_p), gen_p)
        if scan_p is not None:
            bench.scanner = Scanner(link(scan_p), scan_p)
    except BaseException:
        for opened_link in bench_links:
            opened_link.close()
        raise
    return bench


def simulated_bench(
    true_board: Board,
    *,
    seed: int | None = None,
    dmm: PathLike | None = None,
    supplies: dict[str, PathLike] | None = None,
    scanner: PathLike | None = None,
    ac_meter: PathLike | None = None,
    generator: PathLike | None = None,
    calibration_error: bool = False,
) -> Bench:
    """A :class:`Bench` on a simulated bench answering for ``true_board``.

    Instrument files are optional (built-in simulated ones otherwise); a scanner is
    used only when ``scanner`` names a file, else the simulated operator moves the probe.
    A single supply file applies to every board supply.

    Parameters
    ----------
    true_board : Board
        The hidden board as built.
    seed : int, optional
        Seed of the noise (default 0).
    calibration_error : bool
        See :class:`instruments.simulated_bench.SimulatedBench`.
    """
    import numpy as np

    from reconcile.capture.simulated_bench import SimulatedBench

    dmm_p = _load(dmm, "dc_voltmeter", "--dmm")
    ac_p = _load(ac_meter, "ac_voltmeter", "--ac-meter")
    if ac_p is not None and dmm_p is not None and ac_p.resource != dmm_p.resource:
        raise InputError("with --simulate the DC and AC meter are one simulated DMM: give "
                         "one file with both roles, or only --dmm", key="--ac-meter")
    supply_files = list((supplies or {}).values())
    if len(set(map(os.fspath, supply_files))) > 1:
        raise InputError("with --simulate every supply uses one instrument file",
                         key="--supply")
    sim = SimulatedBench(
        true_board,
        np.random.default_rng(0 if seed is None else seed),
        calibration_error=calibration_error,
        dmm_profile=dmm_p or ac_p,
        supply_profile=_load(supply_files[0], "power_supply", "--supply") if supply_files
        else None,
        generator_profile=_load(generator, "function_generator", "--generator"),
        scanner_profile=_load(scanner, "scanner", "--scanner"),
    )
    return Bench(
        sim.voltmeter,
        supplies=dict(sim.supplies),
        scanner=sim.scanner if scanner is not None else None,
        ac_voltmeter=sim.ac_voltmeter,
        generator=sim.generator,
        prompt=sim.operator,
        links=list(sim.transports.values()),
    )
