"""Opening a garment's live source from its config: the one place that knows serial and OSC sources."""

from __future__ import annotations


def open_garment_source(cfg, model, on_change=None):
    """The daemon's source for a config: a serial port that is reopened when it comes back,
    or OSC over UDP. Raises SourceGone (OSC port busy) or ValueError (bad OSC layout)."""
    from ..sources.oscinput import OscUdpSource
    from ..sources.reconnect import ReconnectingSource
    from ..sources.serialport import SerialSource

    if cfg.input == "osc":
        return OscUdpSource(cfg.listen, cfg.address, cfg.arguments, model.rate_hz, model.channel_names, cfg.resample,
                            senders=getattr(cfg, "senders", ()), token=getattr(cfg, "token", ""))
    return ReconnectingSource(
        lambda: SerialSource(cfg.port, model.n_channels, model.rate_hz, cfg.baud, model.channel_names,
                             cfg.protocol, cfg.timestamp, cfg.resample),
        model.rate_hz, model.channel_names, on_change=on_change)

