"""Running the stages as one live process: the pipeline, the loop, the daemon's config."""

from .pipeline import Pipeline
from .runner import RunStats, StopFlag, Timing, run

__all__ = ["Pipeline", "RunStats", "StopFlag", "Timing", "run"]
