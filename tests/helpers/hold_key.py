"""Holds shift and ctrl down through drape's key output, then waits for SIGTERM like the daemon.

Uses the daemon's own signal handling (bridge.cli) and closes the output on the way out.
"""

import time

from bridge.cli import _stop_on_signals
from bridge.mapping.messages import Destination, KeyAction
from bridge.outputs import open_output
from bridge.service import StopFlag

stop = StopFlag()
_stop_on_signals(stop)
out = open_output(Destination("keys", "keys"))
try:
    out.send(KeyAction(("shift", "ctrl"), "down"))
    while out.pending() or out.stats.sent < 1:
        time.sleep(0.01)
    print("holding", flush=True)
    while not stop.stopped:
        time.sleep(0.02)
finally:
    out.close()
print(f"released after {stop.reason}", flush=True)
