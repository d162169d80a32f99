"""ptares: simulate pulsar-timing-array residuals and recover gravitational-wave signals.

The subpackages read as the pipeline, and data flows one way through them:
:mod:`ptares.physics` (formulas) -> :mod:`ptares.dataset` (the shared data model)
-> :mod:`ptares.inputs` (configs, units, tables) -> :mod:`ptares.simulation` (array,
schedule, signals) -> :mod:`ptares.correlation` (pair correlations, optimal statistics) ->
:mod:`ptares.inference` (likelihood, priors, samplers) -> :mod:`ptares.campaign`
(many runs), with :mod:`ptares.figures` for each stage and :mod:`ptares.cli` as a
thin shell over the functions exported here.

From Python (a notebook, a script), :func:`simulate`, :func:`correlate`, :func:`sensitivity`, :func:`fit`
and :func:`sweep` (:mod:`ptares.api`) run the stages and return result objects with
short summaries; configs may be files, :class:`Config` objects or dicts of sections
with astropy Quantities.  The subpackages are named ``simulation``, ``correlation``,
``inference`` and ``campaign`` so that these function names stay free.
"""

from ptares.api import (
    ComparisonResult,
    FitResult,
    Interrupted,
    NoiseResult,
    SweepResult,
    compare,
    config_from,
    correlate,
    describe,
    export_tables,
    fit,
    import_tables,
    pulsar_noise,
    report,
    sensitivity,
    simulate,
    sweep,
)
from ptares.dataset import Dataset, PulsarData, load_dataset, write_dataset
from ptares.errors import InputError
from ptares.inputs.config import Config, load_config, parse_config
from ptares.physics.patterns import correlation_matrix, dipole, hellings_downs, monopole
from ptares.version import __version__

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
    "correlate",
    "sensitivity",
    "report",
    "fit",
    "compare",
    "pulsar_noise",
    "sweep",
    "describe",
    "import_tables",
    "export_tables",
    "config_from",
    "CorrelationResult",
    "FitResult",
    "ComparisonResult",
    "NoiseResult",
    "SweepResult",
    "Interrupted",
    "InputError",
]


def __getattr__(name):
    """``ptares.CorrelationResult`` on first use (its module pulls in scipy.stats, which ``import ptares`` avoids)."""
    if name == "CorrelationResult":
        from ptares.correlation.analysis import CorrelationResult

        return CorrelationResult
    raise AttributeError(f"module 'ptares' has no attribute {name!r}")
