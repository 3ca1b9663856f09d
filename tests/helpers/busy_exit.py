"""Opens the outputs named on the command line, keeps them busy, then ends as told.

Arguments, one per output: osc:PORT (OSC over UDP to 127.0.0.1), sacn:PORT (sACN unicast
to 127.0.0.1), midi (a virtual port "busy-out" on the JACK server of JACK_DEFAULT_SERVER),
keys (X11 keys on DISPLAY: shift is held down).

Prints "busy" once every output has sent something, then reads commands, one a line:
  reopen-midi   open one more MIDI output (a new JACK client) and close it again
  close         close every output, as the daemon does on its way out; print "closed"
  exit          send a burst to every output and end at once (outputs still busy, and
                still open unless closed before)
"""

import sys
import time

from bridge.mapping.messages import Destination, KeyAction, LightLevels, MidiNote, OscMessage
from bridge.outputs import open_output

MIDI = Destination("synth", "midi", port_name="busy-out", virtual=True, midi_api="mido.backends.rtmidi/UNIX_JACK")


def destination(spec: str) -> Destination:
    kind, _, port = spec.partition(":")
    if kind == "osc":
        return Destination("osc", "osc", host="127.0.0.1", port=int(port))
    if kind == "sacn":
        return Destination("lights", "sacn", host="127.0.0.1", port=int(port), universe=1, keepalive_s=0.1)
    if kind == "midi":
        return MIDI
    if kind == "keys":
        return Destination("keys", "keys")
    raise SystemExit(f"unknown output {spec!r}")


def burst(outputs: dict, n: int) -> None:
    for i in range(n):
        for kind, out in outputs.items():
            if kind == "osc":
                out.send(OscMessage("/busy", (i,)))
            elif kind == "sacn":
                out.send(LightLevels(1, {1 + i % 512: 200}))
            elif kind == "midi":
                out.send(MidiNote(1, 40 + i % 40, 100))  # note-ons only: they sound until released


outputs = {spec.partition(":")[0]: open_output(destination(spec)) for spec in sys.argv[1:]}
if "keys" in outputs:
    outputs["keys"].send(KeyAction(("shift",), "down"))
burst(outputs, 20)
end = time.monotonic() + 10
while any(o.stats.sent == 0 for o in outputs.values()) and time.monotonic() < end:
    time.sleep(0.01)
print("busy", flush=True)
for line in sys.stdin:
    command = line.strip()
    if command == "reopen-midi":
        open_output(MIDI).close()
        print("reopened", flush=True)
    elif command == "close":
        for out in outputs.values():
            out.close()
        print("closed", flush=True)
    elif command == "exit":
        burst(outputs, 200)
        break
