"""Windows, features and classifiers: conditioned streams in, class probabilities out."""

from .classifiers import CLASSIFIERS, fit_cases, fit_recordings, make_recogniser, predict_proba
from .features import FEATURES_PER_CHANNEL, window_features
from .model import NULL, DtwModel, MiniRocketModel, Model, ModelError
from .model_files import load_model
from .recogniser import Recogniser
from .training import TrainingSettings, fit_linear
from .windows import WindowSpec, Windower, all_windows

__all__ = [
    "CLASSIFIERS", "DtwModel", "MiniRocketModel", "fit_cases", "fit_recordings", "make_recogniser", "predict_proba",
    "FEATURES_PER_CHANNEL", "NULL", "Model", "ModelError", "Recogniser", "TrainingSettings",
    "WindowSpec", "Windower", "all_windows", "fit_linear", "load_model", "window_features",
]
