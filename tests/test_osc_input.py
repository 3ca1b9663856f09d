"""OSC over UDP as a sample source: layout from the config, bad datagrams counted."""

import time

import numpy as np
from hypothesis import given, settings, strategies as st
from pythonosc.osc_bundle_builder import IMMEDIATELY, OscBundleBuilder
from pythonosc.osc_message_builder import OscMessageBuilder
from pythonosc.udp_client import SimpleUDPClient

from bridge.sources.oscinput import OscUdpSource


def msg(address, *args):
    b = OscMessageBuilder(address)
    for a in args:
        b.add_arg(a)
    return b.build()


def test_samples_by_name_bundles_and_bad_messages():
    src = OscUdpSource("127.0.0.1:0", "/jacket/antennas", ["t_s", "right", "-", "left"], 100.0,
                       channel_names=("left", "right"), resample=False)
    client = SimpleUDPClient("127.0.0.1", src.port)
    client.send_message("/jacket/antennas", [0.0, 2000.0, 7, 1000.0])
    bundle = OscBundleBuilder(IMMEDIATELY)
    bundle.add_content(msg("/jacket/antennas", 0.01, 2001.0, 7, 1001.0))
    bundle.add_content(msg("/jacket/antennas", 0.02, 2002.0, 7, 1002.0))
    client.send(bundle.build())
    client.send_message("/elsewhere", [1.0])
    client.send_message("/jacket/antennas", [0.03, 2003.0])          # too few arguments
    client.send_message("/jacket/antennas", [0.03, -5.0, 7, 1003.0])  # not a frequency
    client._sock.sendto(b"not osc at all", ("127.0.0.1", src.port))
    got = []
    deadline = time.monotonic() + 3
    while sum(len(b) for b in got) < 3 and time.monotonic() < deadline:
        got.append(src.read())
    time.sleep(0.05)
    got.append(src.read())
    f = np.concatenate([b.freq_hz for b in got])
    np.testing.assert_array_equal(f, [[1000.0, 2000.0], [1001.0, 2001.0], [1002.0, 2002.0]])
    c = src.counters()
    assert (c["good"], c["other_address"], c["wrong_count"], c["out_of_range"], c["malformed"]) == (3, 1, 1, 1, 1)
    src.close()


@settings(max_examples=200, deadline=None)
@given(st.binary(max_size=600))
def test_random_datagrams_are_counted_not_raised(data):
    src = OscUdpSource("127.0.0.1:0", "/s", ["a", "b"], 100.0)
    try:
        src.feed_datagram(data)
        c = src.counters()
        assert c["good"] + c["malformed"] + c["other_address"] + c["wrong_count"] + c["out_of_range"] >= 1 or data == b""
    finally:
        src.close()
