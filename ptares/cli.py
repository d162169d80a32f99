"""The ``ptares`` command line: a thin shell over the Python API.

Mistakes in what the user gave (a config key, a file) print one line and exit
with status 2; nothing is written for a run that fails its checks.
"""

from __future__ import annotations

import argparse
import os
import sys
import warnings
from pathlib import Path

from ptares import __version__
from ptares.errors import InputError, PhysicsWarning
from ptares.inputs.config import with_overrides

_default_showwarning = warnings.showwarning

__all__ = ["main"]


def _summary(config) -> str:
    """A short description of what a config will simulate."""
    from ptares.physics.timing_model import column_names
    from ptares.simulation.array import build_array, observe
    from ptares.simulation.signals import Context, build_components
    from ptares.simulation.simulate import config_tables, run_seed

    seed = run_seed(config)
    tables = config_tables(config, len(column_names(config.timing_model.fit)), config.array.mode == "inject")
    pulsars = build_array(config, seed, tables)
    observations = observe(pulsars, seed, tables, config.array.window)
    context = Context(pulsars=tuple(pulsars), observations=observations, seed=seed)
    counts = [m.size for m in observations.mjd]
    lines = [
        f"run        {config.run.name} (seed {config.run.seed if config.run.seed is not None else 'fresh each run'})",
        f"pulsars    {len(pulsars)} ("
        + ("random isotropic" if config.array.random else f"tables, {config.array.mode} mode" if tables else "listed") + ")",
        f"TOAs       {sum(counts)} in all, {min(counts)} to {max(counts)} per pulsar",
        f"span       {observations.span / 86400 / 365.25:.2f} yr from MJD {observations.start:.1f}",
        f"timing fit {', '.join(config.timing_model.fit) or 'none'}",
    ]
    for component in build_components(config, pulsars):
        if component.name == "white":
            lines.append("signal     white noise")
        elif component.name == "red":
            n = sum(p.red_amplitude > 0 for p in pulsars)
            lines.append(f"signal     red noise in {n} pulsars, {component.components} frequencies")
        elif component.name == "gwb":
            described = component.describe(context)
            made = (
                f"{len(described['sources'])} binaries" if described["source"] == "binaries" else "Gaussian"
            )
            lines.append(
                f"signal     background A = {component.amplitude:.3g}, gamma = {component.gamma:.3g}, "
                f"{component.components} frequencies, {described['correlation']}, {made}"
            )
        elif component.name == "cw":
            for b in component.binaries:
                lines.append(
                    f"signal     binary {b.name}: f = {b.frequency * 1e9:.3g} nHz, h0 = {b.strain:.3g}, "
                    f"{'evolving' if b.evolve else 'fixed frequency'}, {'with' if b.pulsar_term else 'no'} pulsar term"
                )
    return "\n".join(lines)


def _check(args) -> int:
    from ptares.inputs.config import load_config

    config = load_config(args.config)
    print(f"{args.config}: valid")
    print(_summary(config))
    return 0


OUTPUTS = ("dataset.h5", "residuals.png", "sky.png", "correlation.png")


def _check_output_directory(out: Path, overwrite: bool, outputs=OUTPUTS) -> None:
    """Fail before any work if ``out`` cannot take the outputs or would lose earlier ones."""
    existing = out
    while not existing.exists():
        existing = existing.parent
    if not existing.is_dir():
        raise InputError("exists and is not a directory", str(existing))
    if not os.access(existing, os.W_OK | os.X_OK):
        raise InputError("directory is not writable", str(existing))
    if not overwrite:
        present = [name for name in outputs if (out / name).exists()]
        if outputs is OUTPUTS:
            present += sorted(p.name for p in out.glob("residuals-*.png"))
        if present:
            raise InputError(f"already holds {', '.join(present)}; pass --overwrite to replace them", str(out))


def _simulate(args) -> int:
    from ptares.dataset import write_dataset
    from ptares.figures.dataset import dataset_figures
    from ptares.inputs.config import load_config
    from ptares.simulation.simulate import simulate

    config = load_config(args.config)
    out = Path(args.out)
    _check_output_directory(out, args.overwrite)
    dataset = simulate(config, progress=True)
    try:
        out.mkdir(parents=True, exist_ok=True)
        target = write_dataset(dataset, out / "dataset.h5")
        print(f"wrote {target} ({len(dataset.pulsars)} pulsars, seed {dataset.seed})")
        if not args.no_figures:
            for path in dataset_figures(dataset, out):
                print(f"wrote {path}")
    except OSError as exc:
        raise InputError(f"cannot write outputs ({exc.strerror or exc})", str(out)) from None
    return 0


def _correlate(args) -> int:
    from ptares.correlation.analysis import correlate
    from ptares.correlation.noise import noise_from_dataset, noise_from_values
    from ptares.dataset import load_dataset
    from ptares.figures.common import save_figure
    from ptares.figures.correlation import correlations_figure, nulls_figure
    from ptares.inputs.config import CorrelateSection, load_correlate_section

    section = load_correlate_section(args.config) if args.config else CorrelateSection()
    overrides = {k: getattr(args, k) for k in ("gamma", "components", "noise", "chains", "draws", "bins", "scrambles",
                                               "phase_shifts", "seed") if getattr(args, k) is not None}
    if args.overlays:
        overrides["overlays"] = True
    section = with_overrides(section, overrides)
    dataset = load_dataset(args.dataset)
    if section.noise == "injected":
        noise = noise_from_dataset(dataset)
    elif section.noise == "posterior":
        from ptares.correlation.noise import noise_from_chains

        chains = Path(section.chains)
        if args.config and not chains.is_absolute():
            chains = Path(args.config).parent / chains
        noise = noise_from_chains(dataset, chains, section.draws, section.seed)
    else:
        values = section.noise_values
        noise = noise_from_values(
            dataset,
            white_scale=values.white_scale,
            white_quadrature=values.white_quadrature * 1e-6,
            red_amplitude=values.red_amplitude,
            red_gamma=values.red_gamma,
            red_components=values.red_components,
            common_amplitude=values.common_amplitude,
            common_gamma=values.common_gamma,
            common_components=values.common_components,
            pulsars={
                name: {k: v * 1e-6 if k == "white_quadrature" else v for k, v in table.given().items()}
                for name, table in values.pulsars.items()
            },
        )
    out = Path(args.out)
    outputs = ("correlations.json", "correlations.png", "nulls.png")
    _check_output_directory(out, args.overwrite, outputs)
    result = correlate(dataset, noise, section, progress=True)
    try:
        out.mkdir(parents=True, exist_ok=True)
        result.write(out / "correlations.json")
        print(f"wrote {out / 'correlations.json'}")
        save_figure(correlations_figure(result), out / "correlations.png")
        print(f"wrote {out / 'correlations.png'}")
        if result.nulls:
            save_figure(nulls_figure(result), out / "nulls.png")
            print(f"wrote {out / 'nulls.png'}")
    except OSError as exc:
        raise InputError(f"cannot write outputs ({exc.strerror or exc})", str(out)) from None
    hd = result.estimates["hellings-downs"]
    p_text = ""
    if "p_value" in hd:
        p_text = f", p {'<=' if hd['p_value_is_bound'] else '='} {hd['p_value']:.3g}"
    print(f"hellings-downs: A^2 = {hd['amplitude2']:.3g} +/- {hd['sigma']:.3g}, S/N = {hd['snr']:.2f}{p_text}")
    return 0


def _fit(args) -> int:
    from ptares.dataset import fingerprint, load_dataset, write_dataset, write_json
    from ptares.figures.common import save_figure
    from ptares.figures.inference import corner_figure, trace_figure
    from ptares.inference.model import FitModel
    from ptares.inference.samplers.ensemble import run_sampler, summarise
    from ptares.inputs.config import FitSection, load_config, load_section
    from ptares.simulation.simulate import simulate

    source = Path(args.source)
    out = Path(args.out)
    if source.suffix.lower() in (".h5", ".hdf5"):
        dataset = load_dataset(source)
        section = load_section(args.config, "fit", FitSection) if args.config else FitSection()
        write_copy = False
    else:
        config = load_config(source)
        section = config.fit
        if args.config:
            section = load_section(args.config, "fit", FitSection)
        dataset = None
        write_copy = True
    overrides = {k: getattr(args, k) for k in ("max_steps", "walkers", "workers", "seed") if getattr(args, k) is not None}
    section = with_overrides(section, overrides)
    # chains.h5 is resumed, not overwritten; the other outputs are rewritten at the end of every run
    _check_output_directory(out, True)
    if dataset is None:
        dataset = simulate(config, progress=True)
    model = FitModel(dataset, section)
    try:
        out.mkdir(parents=True, exist_ok=True)
        if write_copy:
            copy = out / "dataset.h5"
            if copy.exists() and fingerprint(load_dataset(copy)) != fingerprint(dataset):
                if not args.overwrite:
                    raise InputError("holds a dataset from another config or seed; pass --overwrite or choose another --out",
                                     str(copy))
                copy.unlink()
            if not copy.exists():
                write_dataset(dataset, copy)
        chains = out / "chains.h5"
        print(f"fitting {model.ndim} parameters ({', '.join(model.names[:6])}{', ...' if model.ndim > 6 else ''}) "
              f"to {len(model.dataset.pulsars)} pulsars; chains in {chains}")
        try:
            run = run_sampler(model, chains, progress=True, overwrite=args.overwrite)
        except KeyboardInterrupt:
            print(f"ptares: interrupted; the chains so far are in {chains}; run the same command to resume",
                  file=sys.stderr)
            return 130
        summary = summarise(model, run)
        write_json(out / "posterior.json", summary)
        samples = run.chain[summary["burn"] :: section.thin].reshape(-1, model.ndim)
        save_figure(corner_figure(samples, model.names, model.injected), out / "corner.png")
        save_figure(trace_figure(run.chain, model.names, summary["burn"], model.injected), out / "trace.png")
    except OSError as exc:
        raise InputError(f"cannot write outputs ({exc.strerror or exc})", str(out)) from None
    state = "converged" if summary["converged"] else "NOT converged (raise max_steps and rerun to continue)"
    print(f"{run.steps} steps, {state}; wrote {out / 'posterior.json'}, corner.png, trace.png")
    for name in model.names[:8]:
        entry = summary["parameters"][name]
        low, high = entry["interval68"]
        print(f"  {name:28s} {entry['median']:+.4g}  68%: [{low:+.4g}, {high:+.4g}]")
    return 0


class _Parser(argparse.ArgumentParser):
    """argparse, but a usage mistake is one line on stderr and exit status 2 like every other input error."""

    def error(self, message):
        self.exit(2, f"{self.prog}: error: {message} (see --help)\n")


def _sweep(args) -> int:
    from ptares.campaign.sweep import run_sweep
    from ptares.campaign.tasks import load_sweep
    from ptares.figures.campaign import sweep_figures
    from ptares.figures.common import save_figure

    _, section = load_sweep(args.config)
    out = Path(args.out)
    _check_output_directory(out, True)
    if args.workers < 1:
        raise InputError("must be at least 1", "--workers")
    try:
        rows = run_sweep(args.config, out, workers=args.workers, scheduler=args.scheduler, overwrite=args.overwrite)
    except KeyboardInterrupt:
        print(f"ptares: interrupted; finished tasks are kept in {out / 'tasks'}; run the same command to resume",
              file=sys.stderr)
        return 130
    except OSError as exc:
        raise InputError(f"cannot write outputs ({exc.strerror or exc})", str(out)) from None
    for name, fig in sweep_figures(rows, section.false_alarm).items():
        save_figure(fig, out / name)
    failed = [r for r in rows if r["status"] != "ok"]
    print(f"{len(rows)} tasks, {len(failed)} failed; wrote {out / 'results.csv'} and figures")
    for row in failed[:5]:
        print(f"  task {row['index']}: {row['error']}")
    return 0


def _import(args) -> int:
    from ptares.dataset import write_dataset
    from ptares.inputs.config import load_config
    from ptares.simulation.simulate import import_tables

    config = load_config(args.config)
    out = Path(args.out)
    _check_output_directory(out, args.overwrite, ("dataset.h5",))
    dataset = import_tables(config)
    try:
        target = write_dataset(dataset, out / "dataset.h5")
    except OSError as exc:
        raise InputError(f"cannot write outputs ({exc.strerror or exc})", str(out)) from None
    print(f"wrote {target} ({len(dataset.pulsars)} pulsars, {sum(p.toa_count for p in dataset.pulsars)} TOAs)")
    return 0


def _export(args) -> int:
    from ptares.dataset import load_dataset
    from ptares.inputs.tables import export_tables

    dataset = load_dataset(args.dataset)
    out = Path(args.out)
    _check_output_directory(out, args.overwrite, ("toas.csv", "pulsars.csv", "import.toml"))
    try:
        for path in export_tables(dataset, out):
            print(f"wrote {path}")
    except OSError as exc:
        raise InputError(f"cannot write outputs ({exc.strerror or exc})", str(out)) from None
    return 0


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="ptares", description="Pulsar-timing-array residual modeller.")
    parser.add_argument("--version", action="version", version=f"ptares {__version__}")
    commands = parser.add_subparsers(dest="command", required=True, metavar="COMMAND", parser_class=_Parser)

    check = commands.add_parser("check", help="validate a config and summarise what it simulates")
    check.add_argument("config", help="TOML config file")
    check.set_defaults(run=_check)

    sim = commands.add_parser("simulate", help="simulate a dataset and its figures from a config")
    sim.add_argument("config", help="TOML config file")
    sim.add_argument("--out", required=True, help="output directory (dataset.h5 and PNG figures)")
    sim.add_argument("--overwrite", action="store_true", help="replace an existing dataset.h5")
    sim.add_argument("--no-figures", action="store_true", help="write the dataset only")
    sim.set_defaults(run=_simulate)

    cor = commands.add_parser("correlate", help="pair cross-correlations, optimal statistics and nulls of a dataset")
    cor.add_argument("dataset", help="HDF5 dataset (from ptares simulate)")
    cor.add_argument("--out", required=True, help="output directory (correlations.json, correlations.png, nulls.png)")
    cor.add_argument("--config", help="TOML file whose [correlate] table holds the settings")
    cor.add_argument("--gamma", type=float, help="spectral index of the template (default: injected, else 13/3)")
    cor.add_argument("--components", type=int, help="Fourier frequencies of the template")
    cor.add_argument("--noise", choices=["injected", "values", "posterior"],
                     help="noise model: dataset truth, [correlate.noise_values], or posterior draws of a fit")
    cor.add_argument("--chains", help="chains.h5 of a ptares fit (with --noise posterior)")
    cor.add_argument("--draws", type=int, help="posterior draws to average over (default 50)")
    cor.add_argument("--bins", type=int, help="angular bins (default 8)")
    cor.add_argument("--scrambles", type=int, help="sky-scramble null trials (default 100; 0 for none)")
    cor.add_argument("--phase-shifts", type=int, help="phase-shift null trials (default 100; 0 for none)")
    cor.add_argument("--seed", type=int, help="seed of the null trials (default 0)")
    cor.add_argument("--overlays", action="store_true", help="also draw the monopole and dipole fits")
    cor.add_argument("--overwrite", action="store_true", help="replace earlier outputs")
    cor.set_defaults(run=_correlate)

    fit = commands.add_parser("fit", help="Bayesian fit of noise, background and continuous waves with emcee")
    fit.add_argument("source", help="a TOML config (simulated, then fitted with its [fit]) or an HDF5 dataset")
    fit.add_argument("--out", required=True, help="output directory (chains.h5, posterior.json, corner.png, trace.png)")
    fit.add_argument("--config", help="TOML file whose [fit] table holds the settings")
    fit.add_argument("--max-steps", type=int, help="most steps to run (rerun with more to extend)")
    fit.add_argument("--walkers", type=int, help="number of walkers (default: automatic)")
    fit.add_argument("--workers", type=int, help="processes for likelihood calls")
    fit.add_argument("--seed", type=int, help="seed of the sampler")
    fit.add_argument("--overwrite", action="store_true", help="start the chains afresh instead of resuming")
    fit.set_defaults(run=_fit)

    sweep = commands.add_parser("sweep", help="injection-recovery campaign over a [sweep] grid, resumable")
    sweep.add_argument("config", help="TOML config with a [sweep] table")
    sweep.add_argument("--out", required=True, help="output directory (tasks/, results.csv, figures)")
    sweep.add_argument("--workers", type=int, default=1, help="local worker processes (default 1)")
    sweep.add_argument("--scheduler", help="address of a Dask scheduler (instead of local workers)")
    sweep.add_argument("--overwrite", action="store_true", help="discard earlier results of this directory")
    sweep.set_defaults(run=_sweep)

    imp = commands.add_parser("import", help="make a dataset from a TOA table and a catalogue, without simulating")
    imp.add_argument("config", help="TOML config whose [array] names the table and catalogue")
    imp.add_argument("--out", required=True, help="output directory (dataset.h5)")
    imp.add_argument("--overwrite", action="store_true", help="replace an existing dataset.h5")
    imp.set_defaults(run=_import)

    exp = commands.add_parser("export", help="write a dataset as a TOA table and a catalogue (CSV)")
    exp.add_argument("dataset", help="HDF5 dataset")
    exp.add_argument("--out", required=True, help="output directory (toas.csv, pulsars.csv, import.toml)")
    exp.add_argument("--overwrite", action="store_true", help="replace existing tables")
    exp.set_defaults(run=_export)
    return parser


def _one_line_warning(message, category, filename, lineno, file=None, line=None):
    """Physics warnings as one line each, like errors."""
    if issubclass(category, PhysicsWarning):
        print(f"ptares: warning: {message}", file=sys.stderr if file is None else file)
    else:
        _default_showwarning(message, category, filename, lineno, file, line)


def main(argv=None) -> int:
    warnings.showwarning = _one_line_warning
    args = build_parser().parse_args(argv)
    try:
        return args.run(args)
    except InputError as exc:
        print(f"ptares: error: {exc.line()}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("ptares: interrupted; nothing was written for the unfinished step", file=sys.stderr)
        return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
