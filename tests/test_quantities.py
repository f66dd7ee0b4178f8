"""The quantity registry (reconcile/model/quantities.py): one place for names and units.

Outside reference: the contract's readings table (docs/formats.md §3), which outside
checks read for each quantity's unit. The remaining checks are self-consistency checks
of the layout: the registry is the only table of units and default uncertainties, and
the engine and the measurement model agree with it.
"""

from __future__ import annotations

import dataclasses
import re
from pathlib import Path

import pytest

from reconcile.engine.small_signal import SmallSignal
from reconcile.inference import measure
from reconcile.model import quantities
from reconcile.model.quantities import REGISTRY, QuantityKind
from reconcile.model.values import parse_value, si_unit

ROOT = Path(__file__).resolve().parents[1]
DOC = (ROOT / "docs" / "formats.md").read_text(encoding="utf-8")


def _readings_table() -> dict[str, str]:
    """quantity -> unit, from the table of docs/formats.md §3."""
    start = DOC.index("## 3. Readings file (CSV)")
    section = DOC[start: DOC.index("\n## ", start + 1)]
    units: dict[str, str] = {}
    for line in section.splitlines():
        if not line.startswith("| `"):
            continue
        cells = [c.strip() for c in line.strip("|").split("|")]
        names = re.findall(r"`([a-z_]+)`", cells[0])
        unit_cells = [u.strip() for u in cells[-1].split(",")]
        if len(unit_cells) == 1:
            unit_cells *= len(names)
        units.update(zip(names, unit_cells, strict=True))
    return units


def _documented(unit: str) -> str:
    """The contract's words for a unit, as the JSON writes it (SI, K inside)."""
    return {"plain": "", "C or K": "K"}.get(unit, unit)


@pytest.mark.parametrize("name", list(REGISTRY))
def test_unit_is_the_one_in_the_contract_section_3(name: str) -> None:
    # docs/formats.md §3: the unit column of the readings table.
    table = _readings_table()
    assert name in table, f"{name} is registered but not in docs/formats.md §3"
    assert REGISTRY[name].unit == _documented(table[name])


@pytest.mark.parametrize("q", [q for q in REGISTRY.values() if q.unit != "deg"], ids=str)
def test_value_kind_reads_the_unit(q: quantities.Quantity) -> None:
    # Self-consistency: the value kind the loader parses with holds values in the
    # registered unit (one volt written "1 V" is 1.0 in the registry's unit).
    assert si_unit(q.value_kind) == q.unit
    if q.unit and q.value_kind != "temperature":
        assert parse_value(f"1 {q.unit}", q.value_kind) == 1.0


def test_every_readable_quantity_has_a_default_uncertainty_with_its_basis() -> None:
    for q in REGISTRY.values():
        if q.readable:
            assert q.default_uncertainty is not None, q.name
            assert q.default_uncertainty.basis, q.name


def test_the_engine_and_the_measurement_model_use_the_registry() -> None:
    # Self-consistency: every registered small-signal quantity is an engine output,
    # and the model predicts exactly the registry's predicted quantities.
    fields = {f.name for f in dataclasses.fields(SmallSignal)}
    assert set(quantities.names(kind=QuantityKind.SMALL_SIGNAL)) <= fields
    assert set(measure.PREDICTED) == {q.name for q in REGISTRY.values() if q.predicted}
    assert "temperature" not in measure.PREDICTED  # the ambient sets a prior only


def test_registry_is_read_only() -> None:
    with pytest.raises(TypeError):
        REGISTRY["voltage"] = REGISTRY["current"]  # type: ignore[index]
    with pytest.raises(dataclasses.FrozenInstanceError):
        REGISTRY["voltage"].unit = "mV"  # type: ignore[misc]


def _sources() -> list[tuple[Path, str]]:
    paths = [*(ROOT / "reconcile").rglob("*.py"), *(ROOT / "instruments").rglob("*.py")]
    return [(p, p.read_text(encoding="utf-8")) for p in paths if p.name != "quantities.py"]


@pytest.mark.parametrize("name", list(REGISTRY))
def test_no_other_module_keeps_a_unit_for_a_quantity(name: str) -> None:
    # A mapping from a quantity's name to a unit (or to a value kind) anywhere else
    # would be a second copy of the registry.
    units = "|".join(re.escape(u) for u in ("V", "A", "ohm", "ohms", "Ω", "F", "K", "deg",
                                            "volts", "amps", "farads", "plain"))
    pattern = re.compile(rf'"{name}"\s*:\s*\(?\s*"({units})?"')
    copies = [str(p.relative_to(ROOT)) for p, text in _sources() if pattern.search(text)]
    assert not copies, f"{name}: a unit table outside model/quantities.py in {copies}"


def test_no_other_module_writes_a_default_uncertainty_rule() -> None:
    copies = [str(p.relative_to(ROOT)) for p, text in _sources() if "UncertaintyRule(" in text]
    assert not copies, f"default uncertainty rules outside model/quantities.py: {copies}"


def test_self_consistency_a_typed_gains_default_is_what_derive_gain_gives() -> None:
    # Self-consistency check (two of our functions, which must agree): a gain row typed
    # with no uncertainty and `derive gain` with no --u-…; both are first-order
    # propagation of two AC voltages (JCGM 100:2008 eq. 10). The hand-worked value is
    # checked in tests/test_cli.py and tests/test_readings.py.
    from reconcile.data.derived_readings import gain_from_ac
    from reconcile.data.readings import Reading, default_uncertainty
    from reconcile.model.quantities import AC_VOLTAGE_DEFAULT, GAIN_INPUT_VRMS

    for gain in (0.001, 0.5, 1.0, 9.1, 120.0):
        v_in, v_out = GAIN_INPUT_VRMS, gain * GAIN_INPUT_VRMS
        derived = gain_from_ac(v_in, AC_VOLTAGE_DEFAULT.standard(v_in),
                               v_out, AC_VOLTAGE_DEFAULT.standard(v_out))
        typed = default_uncertainty(Reading.from_si("gain", "", gain))
        assert typed == pytest.approx(derived.uncertainty, rel=1e-12), gain


def test_a_dead_stages_gain_keeps_the_ac_meters_noise_floor() -> None:
    # 10 µV of noise on v_out over a 10 mV input: u(G) >= 1e-3 whatever G is, so a gain
    # of 0.001 is not held to 1 % of itself (1e-5) and cannot dominate a fit.
    from reconcile.data.readings import Reading, default_uncertainty

    assert default_uncertainty(Reading.from_si("gain", "", 0.001)) >= 1e-3
    assert default_uncertainty(Reading.from_si("gain", "", 0.0)) == pytest.approx(1e-3)


def test_self_consistency_the_gain_default_assumes_the_capture_runs_amplitude() -> None:
    from reconcile.capture.run import DEFAULT_SIGNAL_VRMS
    from reconcile.model.quantities import GAIN_INPUT_VRMS

    assert GAIN_INPUT_VRMS == DEFAULT_SIGNAL_VRMS
