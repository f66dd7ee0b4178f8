#!/usr/bin/env bash
# The wheel as a user gets it: build it, install it (no extras) in a fresh venv, and run
# the demo in an empty temporary folder, far from the source tree and its sample_data/.
set -euo pipefail
cd "$(dirname "$0")/.."
work="$(mktemp -d)"
trap 'rm -rf "$work"' EXIT
quiet() { "$@" 2> >(grep -v "is ignored: it is neither a file nor a directory" >&2); }
quiet python3 -m pip wheel -q --no-deps -w "$work/dist" . >/dev/null
python3 -m venv "$work/venv"
quiet "$work/venv/bin/pip" install -q "$work"/dist/bench_reconcile-*.whl
mkdir "$work/empty"
cd "$work/empty"
"$work/venv/bin/reconcile" --help >/dev/null
"$work/venv/bin/python" -m reconcile --help >/dev/null
"$work/venv/bin/reconcile" demo --json >"$work/demo.json"
"$work/venv/bin/python" - "$work/demo.json" <<'PY'
import json, pathlib, sys
summary = json.loads(pathlib.Path(sys.argv[1]).read_text())
report = pathlib.Path(summary["files"]["report"])
assert report.is_file() and report.stat().st_size > 10_000, report
assert "site-packages" in summary["sample_data"], summary["sample_data"]
print(f"wheel check: demo ran from the installed wheel; report {report.stat().st_size} bytes")
PY
