"""docs/formats.md, the project's account of its contract, agrees with the code.

The contract is the outside reference here: outside checks read the JSON keys and the
readings quantities that docs/formats.md lists, so every key it promises must be in the
output, and every quantity the loader accepts must be documented.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import reconcile
from reconcile.data.readings import QUANTITIES

ROOT = Path(__file__).resolve().parents[1]
DOC = (ROOT / "docs" / "formats.md").read_text(encoding="utf-8")
SAMPLES = ROOT / "sample_data"


def _section(title: str) -> str:
    start = DOC.index(title)
    nxt = re.search(r"^## ", DOC[start + len(title):], re.M)
    return DOC[start: start + len(title) + (nxt.start() if nxt else len(DOC))]


def _first_json_block(text: str, after: str) -> dict:
    block = re.search(r"```json\n(.*?)```", text[text.index(after):], re.S).group(1)
    # The doc elides lists with [...]; give them a value JSON can read.
    return json.loads(block.replace("[...]", "[]"))


def test_solve_keys_in_section_4_are_in_the_output():
    doc = _first_json_block(_section("## 4. JSON outputs"), "`solve BOARD --json`")
    out = reconcile.solve(reconcile.load_board(SAMPLES / "line_receiver_cb.toml")).to_dict()
    assert set(doc) <= set(out)
    q_doc = next(iter(doc["transistors"].values()))
    q_out = next(iter(out["transistors"].values()))
    assert set(q_doc) <= set(q_out)
    assert set(doc["small_signal"]) <= set(out["small_signal"])


def test_fit_keys_in_section_4_are_in_the_output():
    doc = _first_json_block(_section("## 4. JSON outputs"), "`fit BOARD READINGS --json`")
    board = reconcile.load_board(SAMPLES / "line_receiver_cb.toml")
    fit = reconcile.fit(board, reconcile.load_readings(SAMPLES / "line_receiver_built.csv", board))
    out = fit.to_dict()
    assert {"parameters", "readings", "chi_square", "dof", "verdict", "predicted"} <= set(out)
    for key, fields in doc["parameters"].items():
        assert key in out["parameters"], key
        assert set(fields) <= set(out["parameters"][key]), key
    assert set(doc["readings"][0]) <= set(out["readings"][0])


def test_every_quantity_the_loader_accepts_is_documented_in_section_3():
    table = _section("## 3. Readings file (CSV)")
    documented = set(re.findall(r"^\| `([a-z_]+)`(?:, `([a-z_]+)`)*", table, re.M))
    names = set(re.findall(r"`([a-z_]+)`", "\n".join(
        line for line in table.splitlines() if line.startswith("| `"))))
    assert documented
    missing = set(QUANTITIES) - names
    assert not missing, f"quantities accepted but not in docs/formats.md §3: {missing}"
