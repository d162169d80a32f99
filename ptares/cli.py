"""The ``ptares`` command line: a thin shell over the Python API.

Mistakes in what the user gave (a config key, a file) print one line and exit
with status 2; nothing is written for a run that fails its checks.
"""

from __future__ import annotations

import argparse
import signal
import sys
import threading
import warnings
from pathlib import Path

from ptares.api import COMMAND_LINE, with_figure_formats
from ptares.errors import InputError, PhysicsWarning
from ptares.threads import DEFAULT_THREADS, thread_count, thread_limits
from ptares.version import __version__

_default_showwarning = warnings.showwarning

__all__ = ["main"]


def _check(args) -> int:
    from ptares import api

    text = api.describe(args.config)
    print(f"{args.config}: valid")
    print(text)
    return 0


def _simulate(args) -> int:
    from ptares import api

    api.simulate(args.config, out=args.out, overwrite=args.overwrite, figures=not args.no_figures, verbose=True,
                 threads=args.threads)
    return 0


def _correlate(args) -> int:
    from ptares import api

    options = {k: getattr(args, k) for k in ("spectral_index", "harmonics", "noise", "chains", "draws", "bins", "scrambles",
                                             "phase_shifts", "seed", "estimator") if getattr(args, k) is not None}
    if args.overlays:
        options["overlays"] = True
    result = api.correlate(args.dataset, args.out, settings=args.config, overwrite=args.overwrite, verbose=True,
                           threads=args.threads, **options)
    hd = result.estimates["hellings-downs"]
    p_text = ""
    if "p_value" in hd:
        p_text = f", p from trials {'<=' if hd['p_value_is_bound'] else '='} {hd['p_value']:.3g}"
    if hd.get("p_exact") is not None:
        p_text += f", exact noise-only p = {hd['p_exact']:.3g}"
    if result.settings.get("estimator") == "pair-covariant":
        signal = " (pair-covariant: the background's own scatter included)"
    elif hd.get("sigma_signal") is not None:
        signal = f" (weak-signal; {hd['sigma_signal']:.3g} with the background's own scatter)"
    else:
        signal = ""
    print(f"hellings-downs: A^2 = {hd['amplitude2']:.3g} +/- {hd['sigma']:.3g}{signal}, S/N = {hd['snr']:.2f}{p_text}")
    return 0


def _sensitivity(args) -> int:
    from ptares import api

    options = {k: getattr(args, k) for k in ("false_alarm", "amplitude", "wave_frequency") if getattr(args, k) is not None}
    if args.years:
        options["years"] = args.years
    result = api.sensitivity(args.source, args.out, settings=args.config, overwrite=args.overwrite,
                             figures=not args.no_figures, verbose=True, threads=args.threads, **options)
    print(result)
    return 0


def _report(args) -> int:
    from ptares import api

    result = api.report(args.folder, args.out, threads=args.threads)
    print(f"wrote {result.path}: {len(result.sections)} section(s), {len(result.warnings)} warning(s)")
    for where, text in result.warnings:
        print(f"  warning ({where}): {text}")
    return 0


def _fit(args) -> int:
    from ptares import api

    options = {k: getattr(args, k) for k in ("max_steps", "walkers", "workers", "seed", "sampler")
               if getattr(args, k) is not None}
    try:
        result = api.fit(args.source, args.out, settings=args.config, overwrite=args.overwrite, verbose=True,
                         threads=args.threads, **options)
    except api.Interrupted as exc:
        print(f"ptares: interrupted; the chains so far are in {exc.kept}; run the same command to resume",
              file=sys.stderr)
        return 130
    summary = result.summary
    state = "converged" if result.converged else (f"NOT converged: {summary['not_converged_because']} "
                                                  "(raise max_steps and rerun to continue)")
    rhat = f", largest R-hat {summary['max_rhat']:.3f}" if summary.get("max_rhat") is not None else ""
    print(f"{summary['sampler']} sampler, {result.steps} steps, fewest effective samples "
          f"{summary['effective_samples']:.0f}{rhat}; {state}")
    print(f"wrote {result.out / 'posterior.json'}, corner.png, trace.png")
    for name in sorted(result.names, key=lambda n: "@" in n)[:8]:  # array-wide parameters first
        entry = result.parameters[name]
        low, high = entry["interval68"]
        form = ".1f" if name.endswith("_epoch") else "+.4g"  # an epoch is an MJD: days, not 5.5e+04
        print(f"  {name:28s} {entry['median']:{form}}  68%: [{low:{form}}, {high:{form}}]")
    if result.spectrum is not None:
        for name, entry in result.spectrum["refits"].items():
            text = ", ".join(f"{key} {value['median']:.3g} [{value['interval68'][0]:.3g}, {value['interval68'][1]:.3g}]"
                             for key, value in entry["parameters"].items())
            print(f"  {name.replace('_', ' ')} refitted from the free spectrum: {text} (68%)")
        print(f"wrote {result.out / 'spectrum.json'}, spectrum.png")
    from ptares.inference.samplers.chains import EVIDENCE

    for key, signal in EVIDENCE.items():
        entry, what, symbol = summary.get(key) or {}, signal.label, signal.symbol
        if not entry:
            continue
        limit, evidence = entry["upper_limit"], entry["savage_dickey"]
        error = f" +/- {limit['error']:.2g}" if limit.get("error") is not None else ""
        print(f"  95% upper limit: lg {symbol} < {limit['value']:.3f}{error} ({symbol} < {limit['amplitude']:.3g}; "
              "it depends on the prior)")
        if evidence["ln_bayes_factor"] is not None:
            print(f"  {what} against none (Savage-Dickey at lg {symbol} = {evidence['edge'][0]:g}): "
                  f"ln B = {evidence['ln_bayes_factor']:.2f} +/- {evidence['ln_bayes_factor_error']:.2f}")
        else:
            print(f"  {what} against none (Savage-Dickey): ln B > {evidence['ln_bayes_factor_lower_bound']:.2f} "
                  "(no posterior draw near the prior's lower edge)")
    return 0


def _compare(args) -> int:
    from ptares import api

    fit_options = {k: getattr(args, k) for k in ("max_steps", "seed", "sampler") if getattr(args, k) is not None}
    options = {k: getattr(args, k) for k in ("samples", "patterns", "workers", "direct_fit") if getattr(args, k) is not None}
    try:
        result = api.compare(args.source, args.out, settings=args.config, fit_options=fit_options,
                             scheduler=args.scheduler, overwrite=args.overwrite, verbose=True, threads=args.threads,
                             **options)
    except api.Interrupted as exc:
        print(f"ptares: interrupted; the chains so far are in {exc.kept}; run the same command to resume",
              file=sys.stderr)
        return 130
    content = result.content
    fit = content["uncorrelated_fit"]
    print(f"uncorrelated fit: {fit['sampler']} sampler, {fit['steps']} steps, "
          f"{'converged' if fit['converged'] else 'NOT converged: ' + str(fit['not_converged_because'])}; "
          f"{content['draws']} draws reweighted")
    print("\n".join(result.pattern_lines()))
    direct = [p for p, e in content["patterns"].items() if e["method"] == "bridge"]
    fits = ", ".join(str(result.out / name) for name in ["uncorrelated", *direct])
    print(f"wrote {result.out / 'comparison.json'}, comparison.png and the fits in {fits}")
    return 0


class _Parser(argparse.ArgumentParser):
    """argparse, but a usage mistake is one line on stderr and exit status 2 like every other input error."""

    def error(self, message):
        self.exit(2, f"{self.prog}: error: {message} (see --help)\n")


def _noise(args) -> int:
    from ptares import api

    options = {k: getattr(args, k) for k in ("max_steps", "seed") if getattr(args, k) is not None}
    try:
        result = api.pulsar_noise(args.source, args.out, settings=args.config, workers=args.workers,
                                  scheduler=args.scheduler, overwrite=args.overwrite, verbose=True, threads=args.threads,
                                  **options)
    except api.Interrupted as exc:
        print(f"ptares: interrupted; finished pulsars and chains so far are in {exc.kept}; run the same command to resume",
              file=sys.stderr)
        return 130
    print(f"{len(result.pulsars)} pulsars; wrote {result.out / 'pulsar_noise.json'} and pulsar_noise.png")
    for name in result.failed[:5]:
        print(f"  {name}: failed: {result.pulsars[name]['error']}")
    for name in result.not_converged[:5]:
        print(f"  {name}: NOT converged ({result.pulsars[name]['not_converged_because']}); raise max_steps and rerun")
    return 0


def _sweep(args) -> int:
    from ptares import api

    try:
        result = api.sweep(args.config, args.out, workers=args.workers, scheduler=args.scheduler,
                           overwrite=args.overwrite, verbose=True, threads=args.threads)
    except api.Interrupted as exc:
        print(f"ptares: interrupted; finished tasks are kept in {exc.kept}; run the same command to resume",
              file=sys.stderr)
        return 130
    failed = result.failed
    print(f"{len(result.rows)} tasks, {len(failed)} failed; wrote {result.out / 'results.csv'} and figures")
    for row in failed[:5]:
        print(f"  task {row['index']}: {row['error']}")
    return 0


def _import(args) -> int:
    from ptares import api

    dataset = api.import_tables(args.config, args.out, overwrite=args.overwrite, threads=args.threads)
    print(f"wrote {Path(args.out) / 'dataset.h5'} ({len(dataset.pulsars)} pulsars, {dataset.toa_count} TOAs)")
    return 0


def _export(args) -> int:
    from ptares import api

    for path in api.export_tables(args.dataset, args.out, overwrite=args.overwrite, threads=args.threads):
        print(f"wrote {path}")
    return 0


def _threads(text: str) -> int:
    """The value of ``--threads``: a whole number of at least 1."""
    try:
        return thread_count(int(text))
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number of threads, got {text!r}") from None
    except InputError as exc:
        raise argparse.ArgumentTypeError(exc.message) from None


THREADS_HELP = (f"BLAS and numba threads per process, workers included (default {DEFAULT_THREADS}: "
                "more only pays on cores nothing else uses)")


def _engine_options(command, workers_key: str | None = None) -> None:
    """Where the tasks of a resumable many-task command run, and whether to start afresh; with ``workers_key``
    (a config key) ``--workers`` defaults to that key's value, else to 1."""
    command.add_argument("--workers", type=int, default=None if workers_key else 1,
                         help=f"local worker processes (default {workers_key or 1})")
    command.add_argument("--scheduler", help="address of a Dask scheduler (instead of local workers)")
    command.add_argument("--overwrite", action="store_true", help="discard earlier results of this directory")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="ptares", description="Pulsar-timing-array residual modeller.")
    parser.add_argument("--version", action="version", version=f"ptares {__version__}")
    parser.add_argument("--threads", type=_threads, default=DEFAULT_THREADS, metavar="N", help=THREADS_HELP)
    # every command takes it too, after its name; SUPPRESS keeps a value given before the name
    common = _Parser(add_help=False)
    common.add_argument("--threads", type=_threads, default=argparse.SUPPRESS, metavar="N", help=THREADS_HELP)
    common.add_argument("--figure-formats", nargs="+", choices=["pdf", "svg"], metavar="FORMAT",
                        help="also write every figure as PDF and/or SVG beside its PNG (choices: pdf, svg)")
    commands = parser.add_subparsers(dest="command", required=True, metavar="COMMAND", parser_class=_Parser)

    check = commands.add_parser("check", help="validate a config and summarise what it simulates", parents=[common])
    check.add_argument("config", help="TOML config file")
    check.set_defaults(run=_check)

    sim = commands.add_parser("simulate", help="simulate a dataset and its figures from a config", parents=[common])
    sim.add_argument("config", help="TOML config file")
    sim.add_argument("--out", required=True, help="output directory (dataset.h5 and PNG figures)")
    sim.add_argument("--overwrite", action="store_true", help="replace an existing dataset.h5")
    sim.add_argument("--no-figures", action="store_true", help="write the dataset only")
    sim.set_defaults(run=_simulate)

    cor = commands.add_parser("correlate", parents=[common],
                              help="pair cross-correlations, optimal statistics and nulls of a dataset")
    cor.add_argument("dataset", help="HDF5 dataset (from ptares simulate)")
    cor.add_argument("--out", required=True, help="output directory (correlations.json, correlations.png, nulls.png)")
    cor.add_argument("--config", help="TOML file whose [correlate] table holds the settings")
    cor.add_argument("--spectral-index", type=float, help="spectral index of the template (default: injected, else 13/3)")
    cor.add_argument("--harmonics", type=int, help="Fourier frequencies of the template")
    cor.add_argument("--noise", choices=["injected", "values", "posterior"],
                     help="noise model: dataset truth, [correlate.noise_values], or posterior draws of a fit")
    cor.add_argument("--chains", help="chains.h5 of a ptares fit (with --noise posterior)")
    cor.add_argument("--draws", type=int, help="posterior draws to average over (default 50)")
    cor.add_argument("--bins", type=int, help="angular bins (default 8)")
    cor.add_argument("--scrambles", type=int, help="sky-scramble null trials (default 100; 0 for none)")
    cor.add_argument("--phase-shifts", type=int, help="phase-shift null trials (default 100; 0 for none)")
    cor.add_argument("--seed", type=int, help="seed of the null trials (default 0)")
    cor.add_argument("--overlays", action="store_true", help="also draw the monopole and dipole fits")
    cor.add_argument("--estimator", choices=["weak-signal", "pair-covariant"],
                     help="pair weights of the optimal statistic (default weak-signal)")
    cor.add_argument("--overwrite", action="store_true", help="replace earlier outputs")
    cor.set_defaults(run=_correlate)

    sen = commands.add_parser("sensitivity", parents=[common],
                              help="what an array can detect: strain-noise curves, expected S/N, detection probability, "
                                   "continuous-wave sensitivity")
    sen.add_argument("source", help="a TOML config (its array, no signal simulated) or an HDF5 dataset")
    sen.add_argument("--out", required=True, help="output directory (sensitivity.json and PNG figures)")
    sen.add_argument("--config", help="TOML file whose [sensitivity] table holds the settings")
    sen.add_argument("--false-alarm", type=float, help="false-alarm probability of detection (default 0.001)")
    sen.add_argument("--amplitude", type=float, help="background amplitude against time (default: injected, else 2.4e-15)")
    sen.add_argument("--years", type=float, nargs="+", help="observing spans of the S/N against time (yr)")
    sen.add_argument("--wave-frequency", type=float, help="frequency of the continuous-wave sky map (nHz)")
    sen.add_argument("--no-figures", action="store_true", help="write sensitivity.json only")
    sen.add_argument("--overwrite", action="store_true", help="replace earlier outputs")
    sen.set_defaults(run=_sensitivity)

    rep = commands.add_parser("report", parents=[common],
                              help="one self-contained HTML page for an output folder of any command")
    rep.add_argument("folder", help="output folder of simulate, correlate, fit, compare, noise, sweep or sensitivity")
    rep.add_argument("--out", help="the page's path (default FOLDER/report.html)")
    rep.set_defaults(run=_report)

    fit = commands.add_parser("fit", parents=[common],
                              help="Bayesian fit of noise, background, continuous waves and memory steps (emcee or blocked Gibbs)")
    fit.add_argument("source", help="a TOML config (simulated, then fitted with its [fit]) or an HDF5 dataset")
    fit.add_argument("--out", required=True, help="output directory (chains.h5, posterior.json, corner.png, trace.png)")
    fit.add_argument("--config", help="TOML file whose [fit] table holds the settings")
    fit.add_argument("--max-steps", type=int, help="most steps to run (rerun with more to extend)")
    fit.add_argument("--sampler", choices=["auto", "ensemble", "gibbs"],
                     help="ensemble (emcee) or blocked Gibbs; auto: Gibbs above 20 free parameters")
    fit.add_argument("--walkers", type=int, help="number of walkers (default: automatic)")
    fit.add_argument("--workers", type=int, help="processes: likelihood calls (ensemble) or chains side by side (Gibbs)")
    fit.add_argument("--seed", type=int, help="seed of the sampler")
    fit.add_argument("--overwrite", action="store_true", help="start the chains afresh instead of resuming")
    fit.set_defaults(run=_fit)

    cmp = commands.add_parser("compare", parents=[common],
                              help="Bayes factor of Hellings-Downs (and monopole, dipole) against an uncorrelated "
                                   "common process, by reweighting or bridge sampling")
    cmp.add_argument("source", help="a TOML config (simulated, then fitted) or an HDF5 dataset")
    cmp.add_argument("--out", required=True,
                     help="output directory (comparison.json, comparison.png, the uncorrelated fit in uncorrelated/, "
                          "any direct fit in hellings-downs/, monopole/, dipole/)")
    cmp.add_argument("--config", help="TOML file whose [fit] and [compare] tables hold the settings")
    cmp.add_argument("--patterns", nargs="+", choices=["hellings-downs", "monopole", "dipole"],
                     help="correlation patterns to weigh against the uncorrelated model (hellings-downs always)")
    cmp.add_argument("--samples", type=int, help="most posterior draws to reweight (default 2000)")
    cmp.add_argument("--direct-fit", choices=["auto", "always", "never"],
                     help="fit a pattern directly and bridge both posteriors: when reweighting is unreliable (auto, the "
                          "default), always, or never")
    cmp.add_argument("--max-steps", type=int, help="most steps of each fit (rerun with more to extend)")
    cmp.add_argument("--sampler", choices=["auto", "ensemble", "gibbs"], help="sampler of the fits")
    cmp.add_argument("--seed", type=int, help="seed of the sampler and of the draws' selection")
    _engine_options(cmp, workers_key="[compare] workers")
    cmp.set_defaults(run=_compare)

    noise = commands.add_parser("noise", parents=[common],
                                help="fit every pulsar's own noise alone, in parallel (for [fit] pulsar_noise)")
    noise.add_argument("source", help="a TOML config (simulated first) or an HDF5 dataset")
    noise.add_argument("--out", required=True, help="output directory (pulsar_noise.json, pulsars/, pulsar_noise.png)")
    noise.add_argument("--config", help="TOML file whose [fit] table holds the noise model and sampler settings")
    noise.add_argument("--max-steps", type=int, help="most steps per pulsar (rerun with more to extend)")
    noise.add_argument("--seed", type=int, help="seed of the samplers")
    _engine_options(noise)
    noise.set_defaults(run=_noise)

    sweep = commands.add_parser("sweep", parents=[common],
                                help="injection-recovery campaign over a [sweep] grid, resumable")
    sweep.add_argument("config", help="TOML config with a [sweep] table")
    sweep.add_argument("--out", required=True, help="output directory (tasks/, results.csv, figures)")
    _engine_options(sweep)
    sweep.set_defaults(run=_sweep)

    imp = commands.add_parser("import", parents=[common],
                              help="make a dataset from a TOA table and a catalogue, without simulating")
    imp.add_argument("config", help="TOML config whose [array] names the table and catalogue")
    imp.add_argument("--out", required=True, help="output directory (dataset.h5)")
    imp.add_argument("--overwrite", action="store_true", help="replace an existing dataset.h5")
    imp.set_defaults(run=_import)

    exp = commands.add_parser("export", help="write a dataset as a TOA table and a catalogue (CSV)", parents=[common])
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
    """Run one command; the exit status: 0 done, 2 bad input, 130 interrupted (Ctrl-C), 143 terminated (SIGTERM).

    SIGTERM (``kill``, a batch system's time limit) is handled like Ctrl-C: temporary files are
    removed, finished work (chains, campaign tasks) is kept, and the same command resumes.
    """
    warnings.showwarning = _one_line_warning
    words = list(sys.argv[1:] if argv is None else argv)
    args = build_parser().parse_args(words)
    terminated = []

    def stop(signum, frame):
        terminated.append(signum)
        raise KeyboardInterrupt

    previous = None
    if threading.current_thread() is threading.main_thread():
        previous = signal.signal(signal.SIGTERM, stop)
    token = COMMAND_LINE.set(("ptares", *words))  # messages name options as --flags; provenance records the words
    try:
        with thread_limits(args.threads), with_figure_formats(getattr(args, "figure_formats", None)):
            code = args.run(args)
    except InputError as exc:
        print(f"ptares: error: {exc.line()}", file=sys.stderr)
        code = 2
    except KeyboardInterrupt:
        print("ptares: interrupted; nothing was written for the unfinished step", file=sys.stderr)
        code = 130
    finally:
        COMMAND_LINE.reset(token)
        if previous is not None:
            signal.signal(signal.SIGTERM, previous)
    return 128 + signal.SIGTERM if terminated and code == 130 else code


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
