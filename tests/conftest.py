import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent


@pytest.fixture(scope="session")
def demo_model():
    """The model `drape demo` trains: simulated wearer 0, seed 1, two training sessions."""
    from bridge.evaluation.simulated import train_simulated

    return train_simulated(seed=1, wearer=0)


@pytest.fixture(scope="session")
def demo_model_file(demo_model, tmp_path_factory):
    return demo_model.save(tmp_path_factory.mktemp("model") / "jacket.npz")


def drape_cmd(*args):
    """The drape command as a subprocess argument list (works without the console script on PATH)."""
    return [sys.executable, "-m", "bridge", *args]


@pytest.fixture(scope="session")
def second_model_file(tmp_path_factory):
    """A different, smaller model: simulated wearer 1 (seed 4), one session of training."""
    from bridge.evaluation.simulated import train_simulated

    return train_simulated(seed=4, wearer=1, repetitions=6, sessions=1, null_s=90.0).save(
        tmp_path_factory.mktemp("model2") / "chorus.npz")


def linear_on_a_take(folder, repetitions: int = 1):
    """(a simulated take, a linear model fitted on it, a take of the same jacket with another
    seed) in ``folder``, made with the drape command as a user would."""
    from bridge.cli import main
    take, other, model = folder / "a.take", folder / "b.take", folder / "m.npz"
    assert main(["simulate", "--repetitions", str(repetitions), "--out", str(take)]) == 0
    assert main(["simulate", "--repetitions", str(repetitions), "--seed", "5", "--out", str(other)]) == 0
    assert main(["fit", str(take), "-o", str(model), "--classifier", "linear"]) == 0
    return take, model, other

