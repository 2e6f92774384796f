"""A monitor process driven over stdin, for the kill/restart test: ``cycle`` -> ``done``."""

from __future__ import annotations

import sys

from monitor.config import load_config
from monitor.service.cycle import Monitor


def main() -> int:
    monitor = Monitor(load_config(sys.argv[1]))
    print("ready", flush=True)
    for line in sys.stdin:
        if line.strip() == "cycle":
            rep = monitor.cycle()
            monitor.refresh_alert_ids()
            print(f"done {rep.rows_read} {rep.estimates_added}", flush=True)
        elif line.strip() == "quit":
            break
    return 0


if __name__ == "__main__":
    sys.exit(main())
