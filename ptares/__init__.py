"""ptares: simulate pulsar-timing-array residuals and recover gravitational-wave signals.

The subpackages read as the pipeline, and data flows one way through them:
:mod:`ptares.inputs` (configs, units, tables) -> :mod:`ptares.physics` (formulas)
-> :mod:`ptares.simulation` (array, schedule, signals) -> :mod:`ptares.dataset`
-> :mod:`ptares.correlation` (pair correlations, optimal statistics) ->
:mod:`ptares.inference` (likelihood, priors, samplers) -> :mod:`ptares.campaign`
(many runs), with :mod:`ptares.figures` for each stage and :mod:`ptares.cli` as a
thin shell over the functions exported here.
"""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("ptares")
except PackageNotFoundError:  # pragma: no cover - running from a source tree
    __version__ = "0.0.0+unknown"

from ptares.dataset import Dataset, PulsarData, load_dataset, write_dataset  # noqa: E402
from ptares.errors import InputError  # noqa: E402
from ptares.inputs.config import Config, load_config, parse_config  # noqa: E402
from ptares.physics.patterns import correlation_matrix, dipole, hellings_downs, monopole  # noqa: E402
from ptares.simulation.simulate import simulate  # noqa: E402

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
