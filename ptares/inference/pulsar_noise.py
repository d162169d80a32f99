"""Results of the per-pulsar noise stage, and how an array fit uses them.

Each pulsar's white and red noise is first fitted alone (``ptares noise``; no common
process), as practitioners do before an array fit.  ``pulsar_noise.json`` holds,
per pulsar, each noise parameter's posterior mean, standard deviation, median and
68% interval, with the fit's convergence verdict and a fingerprint of the pulsar's
data.  An array fit with ``[fit] pulsar_noise = "…/pulsar_noise.json"`` then either
fixes those parameters at their medians (``pulsar_noise_use = "fix"``) or samples
them under normal priors of that mean and standard deviation, truncated to the
default prior's range (``"prior"``).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ptares.dataset import Dataset, fingerprint
from ptares.errors import InputError
from ptares.inputs.config import read_json

__all__ = ["NOISE_FILE", "summary_of_draws", "pulsar_fingerprint", "read_pulsar_noise"]

NOISE_FILE = "pulsar_noise.json"


def summary_of_draws(values: np.ndarray) -> dict:
    """Mean, standard deviation, median and central 68% interval of one parameter's posterior draws."""
    return {"mean": float(np.mean(values)), "sd": float(np.std(values, ddof=1)), "median": float(np.median(values)),
            "interval68": [float(v) for v in np.percentile(values, [15.865, 84.135])]}


def pulsar_fingerprint(dataset: Dataset, name: str) -> str:
    """A hash of what a fit of pulsar ``name`` alone reads from ``dataset``."""
    return fingerprint(dataset.subset([name]))


def read_pulsar_noise(path, dataset: Dataset, where: str = "fit.pulsar_noise") -> dict:
    """Parameter name -> posterior summary for every noise parameter of every pulsar of ``dataset``.

    Refused with one line naming the file: a file that is missing or not a noise-stage
    result, a pulsar it lacks, or a pulsar whose data differ from those it was fitted to.
    """
    path = Path(path)
    if not path.is_file():
        raise InputError("no such noise-stage result (run 'ptares noise' first)", f"{where} = {path}")
    content = read_json(path)
    if not isinstance(content, dict) or not isinstance(content.get("pulsars"), dict):
        raise InputError("not a noise-stage result (no table of pulsars)", str(path))
    pulsars = content["pulsars"]
    result = {}
    for name in dataset.names:
        entry = pulsars.get(name)
        if entry is None:
            raise InputError(f"has no noise result for pulsar {name}", str(path))
        if entry.get("status") != "ok":
            raise InputError(f"the noise fit of pulsar {name} failed ({entry.get('error')}); rerun 'ptares noise'", str(path))
        if entry.get("fingerprint") != pulsar_fingerprint(dataset, name):
            raise InputError(f"pulsar {name}'s noise was fitted to other data", str(path))
        for parameter, summary in entry["parameters"].items():
            result[parameter] = summary
    return result
