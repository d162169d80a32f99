"""ptares: simulate pulsar-timing-array residuals and recover gravitational-wave signals.

The pipeline runs one way: config (:mod:`ptares.config`) -> pulsar array
(:mod:`ptares.pulsar_array`) -> signals and noise (:mod:`ptares.signals`) -> dataset
(:mod:`ptares.dataset`) -> figures (:mod:`ptares.figures`).  Physics lives in
:mod:`ptares.sky`, :mod:`ptares.correlations` and :mod:`ptares.spectra`.
"""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("ptares")
except PackageNotFoundError:  # pragma: no cover - running from a source tree
    __version__ = "0.0.0+unknown"

from .config import Config, load_config, parse_config  # noqa: E402
from .correlations import correlation_matrix, dipole, hellings_downs, monopole  # noqa: E402
from .dataset import Dataset, PulsarData, load_dataset, write_dataset  # noqa: E402
from .errors import InputError  # noqa: E402
from .simulate import simulate  # noqa: E402

__all__ = [
    "__version__",
    "Config",
    "load_config",
    "parse_config",
    "hellings_downs",
    "monopole",
    "dipole",
    "correlation_matrix",
    "Dataset",
    "PulsarData",
    "load_dataset",
    "write_dataset",
    "simulate",
    "InputError",
]
