"""Running the stages as one live process: the pipeline, the loop, the daemon's config."""

from .pipeline import Pipeline, Settling
from .replay import replay_events, replay_take
from .runner import RunStats, StopFlag, Timing, run

__all__ = ["Pipeline", "Settling", "replay_events", "replay_take", "RunStats", "StopFlag", "Timing", "run"]
