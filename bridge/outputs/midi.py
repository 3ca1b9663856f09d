"""MIDI out: a named or virtual port (mido with python-rtmidi) and a Standard MIDI File.

Building the bytes (``midi_bytes``) is separate from sending them. Both outputs keep a
``SoundingNotes`` ledger: on ``Release`` and on close every note still sounding gets its
note-off, then every channel used gets All Notes Off (controller 123, value 0), so no
note is left hanging on a synthesiser when the daemon stops.
"""

from __future__ import annotations

import os
import tempfile
import time
from pathlib import Path

from ..mapping.messages import Arm, MidiControl, MidiNote, MidiProgram, Release
from .base import Output, OutputUnavailable, _refuse

ALL_NOTES_OFF = 123  # MIDI 1.0 channel mode message: controller 123, value 0
DEFAULT_BACKEND = "mido.backends.rtmidi"


def midi_bytes(message) -> bytes:
    """The MIDI 1.0 bytes of a message: status byte (kind | channel − 1), then data bytes."""
    if isinstance(message, MidiNote):
        status = (0x90 if message.on else 0x80) | (message.channel - 1)
        return bytes((status, message.note, message.velocity))
    if isinstance(message, MidiControl):
        return bytes((0xB0 | (message.channel - 1), message.controller, message.value))
    if isinstance(message, MidiProgram):
        return bytes((0xC0 | (message.channel - 1), message.program))
    raise TypeError(f"not a MIDI message: {type(message).__name__}")


class SoundingNotes:
    """Which notes sound on which channel (1–16), and which channels were ever used."""

    def __init__(self):
        self.sounding: dict[int, set[int]] = {}
        self.channels_used: set[int] = set()

    def note(self, message) -> None:
        """Account for a message about to be sent."""
        ch = getattr(message, "channel", None)
        if ch is None:
            return
        self.channels_used.add(ch)
        if isinstance(message, MidiNote):
            notes = self.sounding.setdefault(ch, set())
            # MIDI 1.0: a note-on with velocity 0 is a note-off
            if message.on and message.velocity > 0:
                notes.add(message.note)
            else:
                notes.discard(message.note)
        elif isinstance(message, MidiControl) and message.controller == ALL_NOTES_OFF:
            self.sounding.pop(ch, None)

    def release_messages(self) -> list:
        """Note-off for each sounding note, then All Notes Off on every channel used."""
        out = [MidiNote(ch, n, 0, on=False) for ch in sorted(self.sounding) for n in sorted(self.sounding[ch])]
        out += [MidiControl(ch, ALL_NOTES_OFF, 0) for ch in sorted(self.channels_used)]
        self.sounding.clear()
        return out


NO_MIDI_SYSTEM = (
    "no MIDI system to open a port with ({error}). On Linux either load the ALSA sequencer "
    "(sudo modprobe snd-seq; check that /dev/snd/seq exists) or start a JACK server "
    "(e.g. jackd --no-realtime -d dummy) and set api = \"mido.backends.rtmidi/UNIX_JACK\" on the "
    "destination (or MIDO_BACKEND). macOS has CoreMIDI built in; on Windows use a named port, as Windows "
    "MIDI cannot create virtual ports. The other destinations keep running."
)


def jack_server_socket(server_name: str = "") -> Path:
    """Where a JACK 2 server on Linux listens: ``/dev/shm/jack_<server>_<uid>_0``.

    The server name is ``server_name``, else JACK_DEFAULT_SERVER, else "default" (as libjack
    picks it). A server that stops removes the socket; one that starts makes a new one."""
    name = server_name or os.environ.get("JACK_DEFAULT_SERVER", "") or "default"
    uid = os.getuid() if hasattr(os, "getuid") else 0
    return Path("/dev/shm") / f"jack_{name}_{uid}_0"


def _identity(path: Path) -> tuple | None:
    try:
        st = path.stat()
    except OSError:
        return None
    return (st.st_dev, st.st_ino)


class MidiPortOutput(Output):
    """Sends to a MIDI port by name, or creates a virtual port others can connect to.

    ``api`` is a mido backend name such as "mido.backends.rtmidi/UNIX_JACK"; empty means
    MIDO_BACKEND from the environment, else mido's rtmidi default for the platform.

    On JACK the port belongs to the server it was opened on. When that server stops,
    libjack frees the client the next time anything in the process opens a JACK client,
    and touching the old port after that crashes the process (python-rtmidi still holds
    the freed client). So the output notes which server socket it was opened on and, once
    that server is gone or replaced, drops messages and lets go of nothing on close: the
    notes ended with the server.
    """

    def __init__(self, name: str, port_name: str = "", virtual: bool = False, api: str = "",
                 client_name: str = "drape", settle_s: float = 0.2):
        super().__init__(name)
        self.settle_s = settle_s
        import mido
        api = api or os.environ.get("MIDO_BACKEND", "") or DEFAULT_BACKEND
        try:
            self.backend = mido.Backend(api, load=True)
        except ImportError as exc:
            raise OutputUnavailable(
                f"MIDI output {name!r}: the MIDI backend {api!r} cannot load ({exc}); "
                "install the extra: pip install 'drape-bridge[midi]'") from None
        if virtual and not port_name:
            raise ValueError(f"MIDI output {name!r}: a virtual port needs a port_name")
        try:
            if virtual:
                self.port = self.backend.open_output(port_name, virtual=True, client_name=client_name)
            else:
                names = self.backend.get_output_names()
                if not port_name and not names:
                    raise OutputUnavailable(
                        f"MIDI output {name!r}: no MIDI output ports exist; connect a device, "
                        "or set virtual = true with a port_name to create one")
                if port_name and port_name not in names:
                    raise OutputUnavailable(
                        f"MIDI output {name!r}: no port named {port_name!r}; "
                        f"ports now: {', '.join(names) or 'none'}")
                self.port = self.backend.open_output(port_name or None)
        except OutputUnavailable:
            raise
        except OSError as exc:  # rtmidi.SystemError is an OSError: no ALSA sequencer, no JACK server
            raise OutputUnavailable(f"MIDI output {name!r}: " + NO_MIDI_SYSTEM.format(error=exc)) from None
        self.port_name = self.port.name
        self.notes = SoundingNotes()
        self._closed = False
        self._jack_socket = None
        if getattr(self.port, "api", "") == "UNIX_JACK":
            sock = jack_server_socket()
            self._jack_server = _identity(sock)
            if self._jack_server is not None:  # elsewhere (JACK 1, other systems) nothing to watch
                self._jack_socket = sock

    def server_gone(self) -> bool:
        """True when the JACK server this port was opened on has stopped (or was replaced)."""
        return self._jack_socket is not None and _identity(self._jack_socket) != self._jack_server

    def _write(self, message) -> None:
        import mido
        if self.server_gone():
            raise ConnectionError(f"the JACK server of MIDI port {self.port_name!r} stopped; "
                                  "restart drape once JACK runs again")
        self.port.send(mido.Message.from_bytes(midi_bytes(message)))
        self.notes.note(message)

    def _send(self, message) -> None:
        if isinstance(message, Release):
            self.release()
        elif isinstance(message, Arm):
            pass
        elif isinstance(message, (MidiNote, MidiControl, MidiProgram)):
            self._write(message)
        else:
            _refuse(self.name, message)

    def release(self) -> None:
        """Note-off for every sounding note and All Notes Off on every channel used."""
        for m in self.notes.release_messages():
            self._write(m)

    def close(self) -> None:
        """Release, give the MIDI system ``settle_s`` to deliver it, then close the port.

        Some MIDI systems (JACK) hand messages over on their next processing cycle; closing
        the port at once could lose the very note-offs that close is for."""
        if self._closed:
            return
        self._closed = True
        if self.server_gone():
            # the client may already be freed by libjack: leave it (and its notes, gone with
            # the server) alone rather than crash the process on the way out
            self.stats.last_error = f"JACK server stopped under port {self.port_name!r}; nothing to release"
            self.port.closed = True  # nor may mido's port close it when collected
            return
        try:
            sounding = sum(len(n) for n in self.notes.sounding.values())
            self.release()
            self.stats.on_close = (f"note-off for {sounding} sounding note{'' if sounding == 1 else 's'}, "
                                   "All Notes Off on every channel used")
            time.sleep(self.settle_s)
        finally:
            self.port.close()


class MidiFileOutput(Output):
    """Records everything sent into a Standard MIDI File (format 0), written on close.

    Times come from ``clock`` (seconds); the file uses ``ticks_per_beat`` at 120 beats per
    minute (tempo 500 000 µs per beat), so one second is 2 × ticks_per_beat ticks.
    A file already at ``path`` (the last rehearsal's, another garment's) is kept: the
    recording goes to the first free ``NAME-1.mid``, ``NAME-2.mid``, ... and closing says where.
    """

    TEMPO_US_PER_BEAT = 500_000

    def __init__(self, name: str, path: str | Path, ticks_per_beat: int = 480, clock=time.monotonic):
        super().__init__(name)
        if not path:
            raise ValueError(f"MIDI file output {name!r} needs a path")
        self.path = Path(path)
        if not self.path.parent.is_dir():
            raise OutputUnavailable(f"MIDI file output {name!r}: folder {self.path.parent} does not exist")
        self.ticks_per_beat = ticks_per_beat
        self._clock = clock
        self._start_s = clock()
        self._events: list[tuple[float, bytes]] = []
        self.notes = SoundingNotes()
        self._closed = False
        self.written: Path | None = None   # where the recording went (set by the first write)

    def _record(self, message) -> None:
        self._events.append((self._clock() - self._start_s, midi_bytes(message)))
        self.notes.note(message)

    def _send(self, message) -> None:
        if isinstance(message, Release):
            for m in self.notes.release_messages():
                self._record(m)
        elif isinstance(message, Arm):
            pass
        elif isinstance(message, (MidiNote, MidiControl, MidiProgram)):
            self._record(message)
        else:
            _refuse(self.name, message)

    def write(self) -> Path:
        """Write what was recorded so far (replacing the file in one step)."""
        import mido
        f = mido.MidiFile(type=0, ticks_per_beat=self.ticks_per_beat)
        track = mido.MidiTrack()
        track.append(mido.MetaMessage("set_tempo", tempo=self.TEMPO_US_PER_BEAT, time=0))
        last_tick = 0
        for t_s, data in self._events:
            tick = round(mido.second2tick(t_s, self.ticks_per_beat, self.TEMPO_US_PER_BEAT))
            track.append(mido.Message.from_bytes(data, time=max(0, tick - last_tick)))
            last_tick = max(last_tick, tick)
        track.append(mido.MetaMessage("end_of_track", time=0))
        f.tracks.append(track)
        fd, tmp = tempfile.mkstemp(prefix=".drape-", suffix=".mid", dir=self.path.parent)
        os.close(fd)
        try:
            f.save(tmp)
            if self.written is None:
                self.written = _place_new(tmp, self.path)
            else:  # our own file from an earlier write
                os.replace(tmp, self.written)
        finally:
            if os.path.exists(tmp):
                os.unlink(tmp)
        return self.written

    def close(self) -> None:
        if self._closed:
            return
        self._closed = True
        for m in self.notes.release_messages():
            self._record(m)
        path = self.write()
        self.stats.on_close = f"written to {path}" + (f" ({self.path.name} was there already and is kept)"
                                                     if path != self.path else "")


def _place_new(tmp: str, path: Path) -> Path:
    """Put the finished file ``tmp`` at ``path``, or at the first free ``NAME-N.mid`` beside
    it when a file is there already; never over an existing file. Returns where it went."""
    for n in range(10_000):
        target = path if n == 0 else path.with_name(f"{path.stem}-{n}{path.suffix}")
        try:
            os.link(tmp, target)   # fails if the name is taken, even by a file made a moment ago
            return target
        except FileExistsError:
            continue
        except OSError:            # no hard links here (a FAT stick): look, then move
            if not target.exists():
                os.replace(tmp, target)
                return target
    raise OSError(f"no free name beside {path} (NAME-1.mid to NAME-9999.mid are all taken)")
