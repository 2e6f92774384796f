"""A monitor process driven over stdin, for the kill/restart test.

``cycle T`` runs one cycle with the clock at plant time T [epoch s] and answers
``done``; ``quit`` ends. The clock is the replay's, so every stored time (alerts,
heartbeat) follows the data, not the wall clock, and two runs can be compared.
"""

from __future__ import annotations

import sys

from monitor.config import load_config
from monitor.service.cycle import Monitor


def main() -> int:
    clock = {"t": 0.0}
    monitor = Monitor(load_config(sys.argv[1]), clock=lambda: clock["t"])
    print("ready", flush=True)
    for line in sys.stdin:
        cmd, *args = line.split()
        if cmd == "cycle":
            clock["t"] = float(args[0])
            rep = monitor.cycle()
            monitor.refresh_alert_ids()
            print(f"done {rep.rows_read} {rep.estimates_added}", flush=True)
        elif cmd == "quit":
            break
    return 0


if __name__ == "__main__":
    sys.exit(main())
