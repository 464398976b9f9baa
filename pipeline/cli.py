"""The `cubewright` command: argument parsing and error-to-exit-code mapping.

Every subcommand is a thin layer over the Python API (`pipeline.chain`,
`pipeline.config`, `pipeline.particles`, `pipeline.io`).  Bad input ends with
one line ``cubewright: error: ...`` on stderr and exit code 2; ``--debug``
shows the traceback instead.
"""

import argparse
import contextlib
import sys
import warnings
from pathlib import Path

from pipeline import __version__
from pipeline.errors import CubewrightError, CubewrightWarning

__all__ = ["main"]

DEMO_CONFIG = Path(__file__).resolve().parent.parent / "configs" / "demo.toml"


def _add_common(parser):
    parser.add_argument("--quiet", action="store_true", help="print nothing but errors")
    parser.add_argument("--debug", action="store_true", help="show the full traceback on errors")


def _add_overrides(parser):
    parser.add_argument("--set", dest="overrides", action="append", default=[], metavar="KEY=VALUE",
                        help="override a config key, e.g. --set grid.pixel_scale='8 arcsec' (repeatable)")


def _build_parser():
    parser = argparse.ArgumentParser(
        prog="cubewright",
        description="Synthetic 21-cm observations of SPH simulation snapshots.")
    parser.add_argument("--version", action="version", version=f"cubewright {__version__}")
    commands = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    run = commands.add_parser("run", help="make the cube a config describes",
                              description="Read the snapshot, grid the HI, apply beam and noise, write FITS.")
    run.add_argument("config", type=Path, help="TOML config file")
    _add_overrides(run)
    run.add_argument("--output", type=Path, help="output folder (replaces output.directory)")
    run.add_argument("--overwrite", action="store_true", help="replace existing outputs")
    _add_common(run)

    check = commands.add_parser("check", help="validate a config and print the plan",
                                description="Validate a config, print it resolved with normalised units "
                                            "and the derived numbers (pixel size, beam in pixels, channel "
                                            "width, noise, memory) without gridding anything.")
    check.add_argument("config", type=Path, help="TOML config file")
    _add_overrides(check)
    _add_common(check)

    inspect = commands.add_parser("inspect", help="describe a snapshot (HDF5) or a cube (FITS)",
                                  description="List groups, datasets and attributes of an HDF5 snapshot, "
                                              "or axes, units, beam and noise of a FITS cube.")
    inspect.add_argument("file", type=Path, help="HDF5 snapshot or FITS file")
    _add_common(inspect)

    batch = commands.add_parser(
        "batch", help="run a sweep of jobs (snapshots x views x distances x instruments)",
        description="Expand a batch file into jobs, run them on a local Dask cluster (or in this process, or on "
                    "an existing cluster), keep a manifest so the batch can be resumed, and write a catalogue. "
                    "Exit code 1 when a job failed.")
    batch.add_argument("config", type=Path, help="batch TOML file")
    batch.add_argument("--dry-run", action="store_true", help="list the jobs with the memory and disk each needs")
    batch.add_argument("--workers", type=int, metavar="N",
                       help="local worker processes (default: one per core); 1 runs in this process without Dask")
    batch.add_argument("--scheduler", metavar="ADDRESS", help="run on the Dask cluster whose scheduler is at ADDRESS")
    batch.add_argument("--connect-timeout", type=float, default=10.0, metavar="SECONDS",
                       help="seconds to wait for the scheduler to answer (default: 10)")
    batch.add_argument("--resume", action="store_true", help="skip jobs whose outputs exist and verify")
    batch.add_argument("--force", action="store_true",
                       help="resume a manifest from another batch config, or start again over an earlier batch")
    batch.add_argument("--output", type=Path, help="output folder (replaces batch.output_directory)")
    _add_common(batch)

    demo = commands.add_parser("demo", help="generate the invented demo galaxy and observe it",
                               description=f"Write an invented disc galaxy snapshot, run {DEMO_CONFIG.name} "
                                           "on it and print where the outputs are.")
    demo.add_argument("--output", type=Path, default=Path("cubewright-demo"),
                      help="folder for the snapshot and outputs (default: ./cubewright-demo)")
    demo.add_argument("--overwrite", action="store_true", help="replace existing outputs")
    _add_common(demo)
    return parser


def _say(args, text=""):
    if not args.quiet:
        print(text)


@contextlib.contextmanager
def _progress_bar(args):
    """Yield a ``progress(n_read, n_total)`` callable driving a bar on stderr.

    The bar is silent with --quiet or when stderr is not a terminal.
    """
    from tqdm import tqdm

    bar = tqdm(desc="gridding", unit="particle", unit_scale=True,
               disable=args.quiet or not sys.stderr.isatty(), leave=False)

    def advance(n_read, n_total):
        bar.total = n_total
        bar.update(n_read)

    try:
        yield advance
    finally:
        bar.close()


def _load(args):
    from pipeline.config import load_config

    return load_config(args.config, overrides=args.overrides)


def _command_run(args):
    from pipeline.chain import run
    from pipeline.report import format_summary

    config = _load(args)
    with _progress_bar(args) as advance:
        result = run(config, output_dir=args.output, overwrite=args.overwrite, progress=advance)
    _say(args, format_summary(result))
    return 0


def _command_check(args):
    from pipeline.chain import plan_run
    from pipeline.config import describe_config
    from pipeline.report import format_plan

    config = _load(args)
    plan = plan_run(config)
    _say(args, describe_config(config))
    _say(args, format_plan(plan))
    return 0


def _command_inspect(args):
    import h5py

    from pipeline.errors import FitsInputError
    from pipeline.io import describe_fits
    from pipeline.particles import describe_hdf5

    path = args.file
    if not path.is_file():
        raise FitsInputError(f"{path}: no such file")
    if h5py.is_hdf5(path):
        text = describe_hdf5(path)
    else:
        with open(path, "rb") as handle:
            is_fits = handle.read(9) == b"SIMPLE  ="
        if not is_fits:
            raise FitsInputError(f"{path}: neither an HDF5 snapshot nor a FITS file")
        text = describe_fits(path)
    _say(args, text)
    return 0


def _command_demo(args):
    from pipeline.chain import run
    from pipeline.config import load_config
    from pipeline.report import format_summary
    from pipeline.scenario import make_disc_galaxy

    folder = args.output.resolve()
    folder.mkdir(parents=True, exist_ok=True)
    snapshot = folder / "disc_galaxy.h5"
    if snapshot.exists() and not args.overwrite:
        _say(args, f"using the existing demo snapshot {snapshot}")
    else:
        _say(args, f"writing the invented demo galaxy to {snapshot} ...")
        make_disc_galaxy(snapshot, overwrite=args.overwrite)
    config = load_config(DEMO_CONFIG, overrides=[f"snapshot.path='{snapshot}'",
                                                 f"output.directory='{folder}'"])
    with _progress_bar(args) as advance:
        result = run(config, overwrite=args.overwrite, progress=advance)
    _say(args, format_summary(result))
    return 0


def _command_batch(args):
    import os

    from tqdm import tqdm

    from pipeline.batch import connect_client, estimate_jobs, format_estimates, load_batch, run_batch
    from pipeline.errors import ConfigError

    batch = load_batch(args.config, output_dir=args.output)
    if args.dry_run:
        estimates = estimate_jobs(batch)
        _say(args, format_estimates(estimates))
        return 1 if any(estimate.error is not None for estimate in estimates) else 0
    if args.workers is not None and args.workers < 1:
        raise ConfigError(f"--workers: expected a whole number of at least 1; got {args.workers}")
    workers = args.workers or min(os.cpu_count() or 1, len(batch.jobs))
    # The total is every job until the run says how many it skips as complete (--resume).
    bar = tqdm(desc="batch", unit="job", total=len(batch.jobs), disable=args.quiet or not sys.stderr.isatty())

    def advance(record, n_finished, n_to_run):
        bar.total = n_to_run
        bar.set_postfix_str(f"last {record['name']} {record['status']}")
        bar.update(1)

    options = dict(resume=args.resume, force=args.force, progress=advance)
    try:
        if args.scheduler is None and not batch.cluster and workers == 1:
            result = run_batch(batch, **options)
        else:
            scheduler_options = ({"scheduler": args.scheduler} if args.scheduler is not None
                                 else {"cluster": batch.cluster} if batch.cluster else {"workers": workers})
            with connect_client(timeout=args.connect_timeout, **scheduler_options) as client:
                result = run_batch(batch, client=client, **options)
    finally:
        bar.close()
    n_done = sum(record["status"] == "done" for record in result.records) - len(result.skipped)
    _say(args, f"{len(batch.jobs)} job(s): {n_done} done, {len(result.skipped)} skipped (complete), "
               f"{len(result.failed)} failed")
    _say(args, f"  manifest            {batch.output_dir / 'manifest.json'}")
    _say(args, f"  catalogue           {result.catalogue}")
    _say(args, f"  plot                {result.plot}")
    if result.failed:
        errors = {record["name"]: record["error"] for record in result.records if record["status"] != "done"}
        print(f"cubewright: {len(result.failed)} job(s) failed: {', '.join(result.failed)}", file=sys.stderr)
        for name in result.failed:
            print(f"  {name}: {errors[name]}", file=sys.stderr)
        return 1
    return 0


_COMMANDS = {"run": _command_run, "check": _command_check, "inspect": _command_inspect, "batch": _command_batch,
             "demo": _command_demo}


def main(argv=None) -> int:
    """Run the command line; return the exit code (0 ok, 2 bad input)."""
    args = _build_parser().parse_args(argv)
    error = None
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", CubewrightWarning)
        try:
            code = _COMMANDS[args.command](args)
        except CubewrightError as err:
            if args.debug:
                raise
            error, code = f"cubewright: error: {err}", 2
        except KeyboardInterrupt:
            error, code = "cubewright: interrupted", 130
    # Shown only once the recording has stopped: a warning shown while recording would be
    # appended to the very list being shown, without end.
    _print_warnings(list(caught), args)
    if error is not None:
        print(error, file=sys.stderr)
    return code


def _print_warnings(caught, args):
    for item in caught:
        if issubclass(item.category, CubewrightWarning) and not args.quiet:
            print(f"cubewright: warning: {item.message}", file=sys.stderr)
        elif not issubclass(item.category, CubewrightWarning):
            warnings.showwarning(item.message, item.category, item.filename, item.lineno)
