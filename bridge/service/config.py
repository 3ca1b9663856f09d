"""The daemon's config file (TOML): which garment, on which port, with which model and mapping.

    [garment]
    name = "jacket"              # used in logs and event fields
    port = "/dev/ttyACM0"        # the garment's serial device
    baud = 115200
    model = "jacket.npz"         # paths are relative to this file
    mapping = "../mappings/demo.toml"

Acquisition (all optional; see docs/acquisition.md):

    port = "usb:f00d:0001"       # or by USB vendor:product[:serial], or "serial:SERIALNO"
    protocol = "auto"            # "text", "frames" or "auto" (told from the first bytes)
    timestamp = true             # text lines start with the device time (default: detect)
    resample = true              # device-timed samples onto the model's rate
    stall_s = 1.0                # no sample for this long: "no data", postures released
    input = "osc"                # instead of a serial port: OSC over UDP
    listen = "0.0.0.0:9100"
    address = "/jacket/antennas"
    arguments = ["t_s", "left_sleeve", "right_sleeve", "left_front", "right_front"]
"""

from __future__ import annotations

import difflib
import re
import tomllib
from dataclasses import dataclass
from pathlib import Path


class ConfigError(ValueError):
    pass


GARMENT_KEYS = ("name", "port", "baud", "model", "mapping", "protocol", "timestamp", "resample", "stall_s", "input",
                "listen", "address", "arguments", "simulated", "seed", "wearer", "senders", "token")
SERVICE_KEYS = {"control": ("listen", "token", "token_file"), "status": ("to", "levels_hz"), "calibration": ("hold_still_s", "shift")}


def _unknown_keys(path: Path, table: dict, known, where: str) -> None:
    """Refuse a key the config does not have, naming the closest one (a typo gets no silent default)."""
    for k in table:
        if k not in known:
            near = difflib.get_close_matches(str(k), list(known), n=1)
            raise ConfigError(f"{path}: {where} has no key {k!r}; "
                              + (f"did you mean {near[0]!r}?" if near else f"its keys are {', '.join(known)}"))


@dataclass(frozen=True)
class GarmentConfig:
    name: str
    port: str
    baud: int
    model: Path
    mapping: Path | None
    protocol: str = "auto"
    timestamp: bool | None = None
    resample: bool = True
    stall_s: float = 1.0
    input: str = "serial"
    listen: str = ""
    address: str = ""
    arguments: tuple[str, ...] = ()
    simulated: bool = False      # the built-in simulated jacket instead of a device
    seed: int = 1
    wearer: int = 0
    senders: tuple[str, ...] = ()  # OSC input off loopback: the only addresses samples are taken from
    token: str = ""                # ... or the token each sample message starts with


def _read_toml(path: Path) -> dict:
    try:
        return tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise ConfigError(f"{path}: no such config file") from None
    except UnicodeDecodeError:
        raise ConfigError(f"{path}: not a config file (binary; a model or a take?): a config is TOML text") from None
    except (tomllib.TOMLDecodeError, OSError) as exc:
        raise ConfigError(f"{path}: {exc}") from None


def load_config(path: str | Path) -> GarmentConfig:
    """The single-garment config (a ``[garment]`` table); see ``load_service`` for several."""
    path = Path(path)
    doc = _read_toml(path)
    g = doc.get("garment")
    if not isinstance(g, dict):
        raise ConfigError(f"{path}: needs a [garment] table with port and model")
    _unknown_keys(path, doc, ("garment", *SERVICE_KEYS), "the config")
    return _garment(path, g, "[garment]")


def _garment(path: Path, g: dict, where: str) -> GarmentConfig:
    _unknown_keys(path, g, GARMENT_KEYS, where)
    simulated = g.get("simulated", False)
    if not isinstance(simulated, bool):
        raise ConfigError(f"{path}: {where} simulated must be true or false")
    kind = "simulated" if simulated else g.get("input", "serial")
    if kind not in ("serial", "osc", "simulated"):
        raise ConfigError(f"{path}: {where} input must be \"serial\" or \"osc\", not {kind!r}")
    for key in (("port", "model") if kind == "serial" else ("model",)):
        if not isinstance(g.get(key), str):
            raise ConfigError(f"{path}: {where} {key} must be a string (the {'serial device' if key == 'port' else 'model file'})")
    if kind == "serial" and not g["port"].strip():
        raise ConfigError(f"{path}: {where} port is empty: name the garment's serial device, e.g. \"/dev/ttyACM0\" "
                          f"or \"usb:VID:PID\" (`drape ports` lists them)")
    baud = g.get("baud", 115200)
    if not isinstance(baud, int) or baud <= 0:
        raise ConfigError(f"{path}: {where} baud must be a positive integer")
    protocol = g.get("protocol", "auto")
    if protocol not in ("auto", "text", "frames"):
        raise ConfigError(f"{path}: {where} protocol must be \"auto\", \"text\" or \"frames\", not {protocol!r}")
    timestamp = g.get("timestamp")
    if timestamp is not None and not isinstance(timestamp, bool):
        raise ConfigError(f"{path}: {where} timestamp must be true or false")
    resample = g.get("resample", True)
    if not isinstance(resample, bool):
        raise ConfigError(f"{path}: {where} resample must be true or false")
    stall_s = g.get("stall_s", 1.0)
    if not isinstance(stall_s, (int, float)) or isinstance(stall_s, bool) or not 0 < stall_s <= 3600:
        raise ConfigError(f"{path}: {where} stall_s must be a number of seconds above 0")
    listen, address, arguments, senders, token = "", "", (), (), ""
    if kind == "osc":
        listen, address, arguments = g.get("listen"), g.get("address"), g.get("arguments")
        if not isinstance(listen, str) or ":" not in listen:
            raise ConfigError(f"{path}: {where} listen must be \"HOST:PORT\" for OSC input")
        if not isinstance(address, str) or not address.startswith("/"):
            raise ConfigError(f"{path}: {where} address must be an OSC address starting with /")
        if not isinstance(arguments, list) or not arguments or not all(isinstance(a, str) for a in arguments):
            raise ConfigError(f"{path}: {where} arguments must list each OSC argument's name "
                              "(\"t_s\" for the device time, \"-\" to ignore one, else a channel name)")
        senders, token = _osc_input_guard(path, g, where, listen)
    here = path.resolve().parent
    mapping = g.get("mapping")
    return GarmentConfig(
        name=str(g.get("name", "garment")),
        port=g.get("port", ""),
        baud=baud,
        model=(here / g["model"]).resolve(),
        mapping=(here / mapping).resolve() if isinstance(mapping, str) else None,
        protocol=protocol,
        timestamp=timestamp,
        resample=resample,
        stall_s=float(stall_s),
        input=kind,
        listen=listen,
        address=address,
        arguments=tuple(arguments),
        simulated=simulated,
        seed=_int(path, g, "seed", 1, where),
        wearer=_int(path, g, "wearer", 0, where),
        senders=senders,
        token=token,
    )


def _osc_input_guard(path, g: dict, where: str, listen: str) -> tuple[tuple[str, ...], str]:
    """``senders`` and ``token`` of an OSC sample input. Samples drive cues (a blackout among
    them), so an input reachable from the network takes them only from listed senders or with
    the token, as the control port does; on loopback neither is needed."""
    import ipaddress
    from .control import MIN_TOKEN, is_loopback
    senders = g.get("senders", [])
    token = g.get("token", "")
    if not isinstance(senders, list) or not all(isinstance(x, str) for x in senders):
        raise ConfigError(f"{path}: {where} senders must list IP addresses, e.g. [\"10.0.0.21\"]")
    for x in senders:
        try:
            ipaddress.ip_address(x)
        except ValueError:
            raise ConfigError(f"{path}: {where} senders: {x!r} is not an IP address") from None
    if not isinstance(token, str):
        raise ConfigError(f"{path}: {where} token must be a string")
    if token and len(token) < MIN_TOKEN:
        raise ConfigError(f"{path}: {where} token has {len(token)} characters; use at least {MIN_TOKEN}")
    host = listen.rpartition(":")[0] or "0.0.0.0"
    if not is_loopback(host) and not senders and not token:
        raise ConfigError(f"{path}: {where} listen = {listen!r} takes samples from the network, and samples fire "
                          "cues: list the garment's address in senders = [\"...\"], or set a token (at least "
                          f"{MIN_TOKEN} characters) that every sample message starts with; or listen on 127.0.0.1")
    return tuple(senders), token


def _int(path, g, key, default, where):
    v = g.get(key, default)
    if not isinstance(v, int) or isinstance(v, bool) or v < 0:
        raise ConfigError(f"{path}: {where} {key} must be a whole number 0 or more")
    return v


# ---- the daemon in service: several garments, a control port, a status stream ----

NAME_OK = re.compile(r"^[A-Za-z0-9_-]{1,32}$")  # a garment name is an OSC address part


@dataclass(frozen=True)
class ServiceConfig:
    """Everything ``drape start`` runs: the garments and the service's own ports.

        [[garment]]                  # one table per garment (or the single [garment] form)
        name = "left"                # letters, digits, - and _: used in OSC status addresses
        simulated = true             # the built-in jacket (seed, wearer) instead of a device
        model = "left.npz"           # simulated and missing: trained at start and saved here
        mapping = "../mappings/demo.toml"

        [control]
        listen = "127.0.0.1:9100"    # another address than loopback needs token
        token = "long random text"  # at least 16 characters; or token_file = "path"

        [status]
        to = ["127.0.0.1:9200"]      # OSC/UDP destinations of the status stream
        levels_hz = 20               # channel levels and probabilities, per second

        [calibration]
        hold_still_s = 1.0           # at start and on rebaseline
        shift = true                 # detect sudden sustained shifts and re-settle
    """

    garments: tuple[GarmentConfig, ...]
    listen: str = "127.0.0.1:9100"
    token: str = ""
    status_to: tuple[str, ...] = ()
    levels_hz: float = 20.0
    hold_still_s: float = 1.0
    detect_shift: bool = True
    path: Path | None = None


def load_service(path: str | Path) -> ServiceConfig:
    """Read a daemon config: ``[[garment]]`` tables (or one ``[garment]``), ``[control]``,
    ``[status]`` and ``[calibration]``. Raises ConfigError saying what to fix."""
    path = Path(path)
    doc = _read_toml(path)
    tables = doc.get("garment")
    if isinstance(tables, dict):
        tables = [tables]
    if not isinstance(tables, list) or not tables or not all(isinstance(t, dict) for t in tables):
        raise ConfigError(f"{path}: needs [[garment]] tables (or one [garment] table), each with a model")
    garments = []
    for i, t in enumerate(tables):
        where = f"garment {i + 1}"
        t = dict(t)
        t.setdefault("name", "garment" if len(tables) == 1 else f"garment{i + 1}")
        if not isinstance(t["name"], str) or not NAME_OK.match(t["name"]):
            raise ConfigError(f"{path}: {where} name must be 1-32 letters, digits, - or _ (got {t['name']!r})")
        garments.append(_garment(path, t, f"{where} ({t['name']})"))
    names = [g.name for g in garments]
    if len(set(names)) != len(names):
        raise ConfigError(f"{path}: garment names must differ (got {', '.join(names)})")
    c = doc.get("control", {})
    s = doc.get("status", {})
    k = doc.get("calibration", {})
    _unknown_keys(path, doc, ("garment", *SERVICE_KEYS), "the config")
    for table, v in (("control", c), ("status", s), ("calibration", k)):
        if not isinstance(v, dict):
            raise ConfigError(f"{path}: [{table}] must be a table")
        _unknown_keys(path, v, SERVICE_KEYS[table], f"[{table}]")
    listen = c.get("listen", "127.0.0.1:9100")
    token = c.get("token", "")
    if not isinstance(listen, str) or ":" not in listen:
        raise ConfigError(f"{path}: [control] listen must be \"HOST:PORT\"")
    if not isinstance(token, str):
        raise ConfigError(f"{path}: [control] token must be a string")
    if "token_file" in c:  # keeps the token out of a config that is shared or checked in
        if token or not isinstance(c["token_file"], str):
            raise ConfigError(f"{path}: [control] give either token or token_file (a path), not both")
        tf = Path(c["token_file"]).expanduser()
        tf = tf if tf.is_absolute() else path.parent / tf
        try:
            token = tf.read_text(encoding="utf-8").strip()
        except (OSError, UnicodeDecodeError) as exc:
            raise ConfigError(f"{path}: [control] token_file {tf}: {exc}") from None
    if token and len(token) < 16:
        raise ConfigError(f"{path}: [control] token has {len(token)} characters; use at least 16 characters of "
                          "random text (it is all that stands between the network and a panic or a disarm)")
    to = s.get("to", [])
    to = [to] if isinstance(to, str) else to
    if not isinstance(to, list) or not all(isinstance(x, str) and ":" in x for x in to):
        raise ConfigError(f"{path}: [status] to must list \"HOST:PORT\" destinations")
    levels_hz = s.get("levels_hz", 20.0)
    if not isinstance(levels_hz, (int, float)) or isinstance(levels_hz, bool) or not 1 <= levels_hz <= 100:
        raise ConfigError(f"{path}: [status] levels_hz must be 1 to 100")
    hold = k.get("hold_still_s", 1.0)
    if not isinstance(hold, (int, float)) or isinstance(hold, bool) or not 0 <= hold <= 30:
        raise ConfigError(f"{path}: [calibration] hold_still_s must be 0 to 30 seconds")
    shift = k.get("shift", True)
    if not isinstance(shift, bool):
        raise ConfigError(f"{path}: [calibration] shift must be true or false")
    return ServiceConfig(tuple(garments), listen, token, tuple(to), float(levels_hz), float(hold), shift, path)
