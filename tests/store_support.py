"""Shared pieces of the session-store tests: an invented board, readings, and a child
process runner. Imported by ``test_store.py`` and by the writer child ``store_writer.py``."""

from __future__ import annotations

import os
import pwd
from collections.abc import Callable

from reconcile.data.readings import Reading

BOARD_TOML = """\
title = "Store test stage (invented)"

[supplies.VCC]
node = "vcc"
volts = "9"

[resistors.R1]
nodes = ["vcc", "b"]
ohms = "47k"

[resistors.R2]
nodes = ["b", "gnd"]
ohms = "10k"

[resistors.RC]
nodes = ["vcc", "c"]
ohms = "4k7"

[resistors.RE]
nodes = ["e", "gnd"]
ohms = "1k"

[transistors.Q1]
polarity = "npn"
c = "c"
b = "b"
e = "e"
device = "test-npn"

[devices.test-npn]
IS = "5f"
beta = { value = 150, low = 60, high = 400 }
"""

# A readings file as an operator might write it: value strings in several notations,
# blank and given uncertainties, instrument and note cells, a quoted comma.
READINGS_CSV = """\
quantity,at,value,unit,uncertainty,instrument,note
voltage,vcc,8.98,V,,,
voltage,b,1.5,V,2m,DMM-1,
voltage,c/e,2.15,V,,,"probe on TP3, then TP4"
current,VCC,1.21m,A,,,supply read-back
current,RC,1.18m,A,0.01m,,
resistance,R2,9k93,ohm,,,measured out of circuit
temperature,,27,C,,,ambient
"""


def numbered_reading(i: int, tag: str) -> Reading:
    """Reading number ``i`` of writer ``tag``; the note identifies it uniquely."""
    value = 1.0 + i * 1e-3
    note = f"{tag}-{i}"
    return Reading(
        quantity="voltage", at="b", value=value, unit="V", uncertainty=None,
        note=note, raw=("voltage", "b", repr(value), "V", "", "", note, ""),
    )


def run_unprivileged(job: Callable[[], str]) -> str:
    """Run ``job`` in a forked child that cannot override file permissions, return what
    it returned (or the type and text of the exception it raised).

    As root the child becomes ``nobody`` (root ignores permission bits); as anyone else
    it stays who it is.
    """
    read_end, write_end = os.pipe()
    pid = os.fork()
    if pid == 0:  # child
        os.close(read_end)
        try:
            if os.geteuid() == 0:
                nobody = pwd.getpwnam("nobody")
                os.setgroups([])
                os.setgid(nobody.pw_gid)
                os.setuid(nobody.pw_uid)
            message = job()
        except BaseException as exc:  # noqa: BLE001 - reported to the parent
            message = f"{type(exc).__name__}: {exc}"
        os.write(write_end, message.encode("utf-8"))
        os._exit(0)
    os.close(write_end)
    chunks = []
    while chunk := os.read(read_end, 65536):
        chunks.append(chunk)
    os.close(read_end)
    os.waitpid(pid, 0)
    return b"".join(chunks).decode("utf-8")
