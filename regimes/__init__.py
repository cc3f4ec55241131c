"""regimes: classify gridded geophysical fields into recurring regimes.

Stages (each importable): :mod:`regimes.config`, :mod:`regimes.data`,
:mod:`regimes.anomalies`, :mod:`regimes.weights`, :mod:`regimes.eof`,
:mod:`regimes.cluster`, :mod:`regimes.stats`, :mod:`regimes.model`,
:mod:`regimes.pipeline`; for other data and other regime sets
:mod:`regimes.conform`, :mod:`regimes.units`, :mod:`regimes.compare`.
"""

from .cluster import GaussianMixtureRegimes, KMeansRegimes
from .eof import EOF
from .errors import UserError
from .model import RegimeModel

__all__ = ["EOF", "GaussianMixtureRegimes", "KMeansRegimes", "RegimeModel", "UserError"]
