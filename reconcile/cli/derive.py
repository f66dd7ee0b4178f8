"""``reconcile derive ...``: gain and input resistance worked out from typed AC readings.

The same helpers the capture run uses (:mod:`reconcile.derived_readings`), for readings
taken by hand: the result is printed as a readings-file row, ready to paste, with its
propagated standard uncertainty (JCGM 100:2008, first order).
"""

from __future__ import annotations

import math
import sys
from typing import Annotated

import typer

derive_app = typer.Typer(
    name="derive",
    help="Work out gain or input resistance from AC voltage readings, with uncertainty.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    rich_markup_mode=None,
)

AC_DEFAULT = "default"
"""An AC voltage typed with no ``--u-…``: the registry's AC voltage default
(:data:`reconcile.model.quantities.AC_VOLTAGE_DEFAULT`, 1 % of reading + 10 µV), the
same the readings file's gain default is worked out from."""

_U_HELP = "a value, a %, or default (1 % + 10 µV)."
JsonOpt = Annotated[bool, typer.Option("--json", help="Print exactly one JSON object on stdout.")]


def _volts(text: str, option: str) -> float:
    from reconcile.errors import InputError
    from reconcile.model.values import parse_value

    try:
        return parse_value(text, "volts")
    except InputError as err:
        raise err.located(key=option) from None


def _u(text: str, value: float, kind: str, option: str) -> float:
    """A standard uncertainty: the AC voltage default, ``1%`` of the value, or an
    absolute value string."""
    from reconcile.errors import InputError
    from reconcile.model.values import parse_tolerance, parse_value

    if text.strip() == AC_DEFAULT:
        from reconcile.model.quantities import AC_VOLTAGE_DEFAULT

        return AC_VOLTAGE_DEFAULT.standard(value)
    try:
        if text.strip().endswith(("%", "ppm")):
            return abs(value) * parse_tolerance(text)
        return parse_value(text, kind)
    except InputError as err:
        raise err.located(key=option) from None


#: the library's argument names as the options that set them
_OPTION_OF = {"v_in": "--vin", "v_out": "--vout", "u_v_in": "--u-vin", "u_v_out": "--u-vout",
              "v1": "--v1", "v2": "--v2", "u_v1": "--u-v1", "u_v2": "--u-v2",
              "r_series": "--series-resistor", "u_r_series": "--series-tolerance",
              "correlation": "--correlation"}


def _derived(compute, *args: float):  # noqa: ANN001, ANN202 - one of two library functions
    """Run a derived-readings function; its errors name the options, not its arguments."""
    from reconcile.errors import InputError

    try:
        return compute(*args)
    except InputError as err:
        raise InputError(err.message, key=_OPTION_OF.get(err.key or "", err.key)) from None


def _emit(quantity: str, value: float, u: float, unit: str, note: str, json: bool) -> None:
    if json:
        from reconcile.cli.output import emit_json

        emit_json(
            {"quantity": quantity, "value": value, "uncertainty": u, "unit": unit, "note": note}
        )
        return
    # Two significant digits of the uncertainty decide how many decimals the value keeps.
    decimals = max(0, 1 - int(math.floor(math.log10(u)))) if u > 0 else 6
    import csv

    writer = csv.writer(sys.stdout, lineterminator="\n")
    writer.writerow(["quantity", "at", "value", "unit", "uncertainty", "instrument", "note"])
    writer.writerow([quantity, "", f"{value:.{decimals}f}", unit, f"{u:.2g}", "", note])


@derive_app.command("gain")
def derive_gain(
    vin: Annotated[str, typer.Option(help="AC voltage at the input node, rms (e.g. 10.2m).")],
    vout: Annotated[str, typer.Option(help="AC voltage at the output node, rms.")],
    u_vin: Annotated[str, typer.Option(help="Its standard uncertainty: " + _U_HELP)] = AC_DEFAULT,
    u_vout: Annotated[
        str, typer.Option(help="Its standard uncertainty: " + _U_HELP)
    ] = AC_DEFAULT,
    correlation: Annotated[
        float, typer.Option(help="Correlation of the two readings' errors.")
    ] = 0.0,
    json: JsonOpt = False,
) -> None:
    """Gain = Vout / Vin from two AC readings."""
    from reconcile.data.derived_readings import gain_from_ac

    v_in, v_out = _volts(vin, "--vin"), _volts(vout, "--vout")
    g = _derived(
        gain_from_ac,
        v_in,
        _u(u_vin, v_in, "volts", "--u-vin"),
        v_out,
        _u(u_vout, v_out, "volts", "--u-vout"),
        correlation,
    )
    _emit("gain", g.value, g.uncertainty, "", f"from Vin {vin} and Vout {vout}", json)


@derive_app.command("input-resistance")
def derive_input_resistance(
    v1: Annotated[
        str, typer.Option(help="AC voltage at the generator side of the series resistor.")
    ],
    v2: Annotated[str, typer.Option(help="AC voltage at the board input.")],
    series_resistor: Annotated[str, typer.Option(
        "--series-resistor", help="The series resistor, e.g. 75R or 1k.")],
    series_tolerance: Annotated[str, typer.Option(
        "--series-tolerance",
        help="Its tolerance, e.g. 1% or F (read as rectangular).")] = "1%",
    u_v1: Annotated[
        str, typer.Option(help="Standard uncertainty of V1: " + _U_HELP)
    ] = AC_DEFAULT,
    u_v2: Annotated[
        str, typer.Option(help="Standard uncertainty of V2: " + _U_HELP)
    ] = AC_DEFAULT,
    correlation: Annotated[float, typer.Option(help="Correlation of the V1 and V2 errors.")] = 0.0,
    json: JsonOpt = False,
) -> None:
    """Input resistance by the series-resistor method: Rin = Rs·V2/(V1 − V2)."""
    from reconcile.data.derived_readings import (
        input_resistance_series_method,
        series_resistor_uncertainty,
    )
    from reconcile.errors import InputError
    from reconcile.model.values import parse_tolerance, parse_value

    a, b = _volts(v1, "--v1"), _volts(v2, "--v2")
    try:
        rs = parse_value(series_resistor, "ohms")
        u_rs = series_resistor_uncertainty(rs, parse_tolerance(series_tolerance))
    except InputError as err:
        raise err.located(key="--series-resistor/--series-tolerance") from None
    r = _derived(
        input_resistance_series_method,
        a, _u(u_v1, a, "volts", "--u-v1"), b, _u(u_v2, b, "volts", "--u-v2"), rs, u_rs, correlation
    )
    _emit(
        "input_resistance",
        r.value,
        r.uncertainty,
        "ohm",
        f"series-resistor method, Rs {series_resistor}",
        json,
    )
