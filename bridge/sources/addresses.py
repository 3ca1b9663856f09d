"""Whether a listening address is this machine only: shared by every input that takes data
from a network (the OSC sample input here, the control port in ``service``)."""

from __future__ import annotations

import ipaddress
import socket


def is_loopback(host: str) -> bool:
    """True when ``host`` names this machine only. A name is resolved, and every address it
    resolves to must be loopback (a hosts file can map "localhost" elsewhere)."""
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        pass
    try:
        infos = socket.getaddrinfo(host, None, proto=socket.IPPROTO_UDP)
    except (socket.gaierror, UnicodeError):
        return False
    return bool(infos) and all(ipaddress.ip_address(i[4][0].split("%")[0]).is_loopback for i in infos)
