"""A writer process for the store tests: adds readings one by one, printing each id once
its transaction has committed.

    python tests/store_writer.py LOCATION SESSION COUNT TAG

It opens the store, prints ``ready``, waits for one line on stdin (so that several
writers can be started together), then adds COUNT readings (see
``store_support.numbered_reading``) and prints ``done``.
"""

from __future__ import annotations

import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

from store_support import numbered_reading  # noqa: E402

from reconcile.store.repository import open_store  # noqa: E402


def main(argv: list[str]) -> int:
    location, session_id, count, tag = argv[1], argv[2], int(argv[3]), argv[4]
    with open_store(location) as store:
        print("ready", flush=True)
        sys.stdin.readline()
        for i in range(count):
            reading_id = store.add_reading(session_id, numbered_reading(i, tag))
            print(reading_id, flush=True)
    print("done", flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
