"""The ``scaling`` command.  No statistics here: parse, call, print.

Every :class:`~scaling.errors.ScalingError` becomes one line on stderr
beginning ``error:`` and exit code 2; anything else is an internal error
(exit 1; the traceback is shown with ``--debug`` or ``SCALING_DEBUG=1``).
"""

from __future__ import annotations

import argparse
import os
import sys
import traceback
from pathlib import Path

# numpy, pandas and the pipeline are imported inside the commands, so that
# `scaling --version`, `--help` and argument errors start in a fraction of a second.
from ._version import __version__
from .errors import ScalingError

__all__ = ["main", "entry_point"]


class _Parser(argparse.ArgumentParser):
    def error(self, message):  # usage line, then one 'error:' line, exit 2
        self.print_usage(sys.stderr)
        self.exit(2, f"error: {message}\n")


def _build_parser() -> argparse.ArgumentParser:
    p = _Parser(prog="scaling", description="Fit allometric power laws y = a·x^b "
                "on log-log scales from a YAML config.")
    p.add_argument("--version", action="version", version=f"scaling {__version__}")
    p.add_argument("--debug", action="store_true", help="show tracebacks of internal errors")
    sub = p.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    # --debug is accepted after the command too (scaling run X.yaml --debug).
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("--debug", action="store_true", default=argparse.SUPPRESS,
                        help=argparse.SUPPRESS)

    run = sub.add_parser("run", parents=[common], help="run a config and write the output folder")
    run.add_argument("config", metavar="CONFIG.yaml")
    run.add_argument("--out", metavar="DIR", help="output folder (relative to the current "
                     "folder); default: output.dir of the config")
    run.add_argument("--force", action="store_true",
                     help="replace scaling's files in a non-empty output folder")
    run.add_argument("--quiet", action="store_true", help="print nothing but errors")

    check = sub.add_parser("check", parents=[common], help="validate config and data; fit nothing")
    check.add_argument("config", metavar="CONFIG.yaml")

    init = sub.add_parser("init", parents=[common], help="write a commented starter config, "
                          "or a worked example (config and data) into a folder")
    init.add_argument("path", metavar="PATH", help="the config file to write; for the worked "
                      "examples (fisheries, forestry, palaeo, physiology) the folder")
    init.add_argument("--example", default="basic", metavar="NAME",
                      help="starter to write: " + ", ".join(_examples()))
    init.add_argument("--force", action="store_true", help="overwrite PATH if it exists")

    pred = sub.add_parser("predict", parents=[common], help="predict from a saved results folder")
    pred.add_argument("results", metavar="RESULTS_DIR")
    src = pred.add_mutually_exclusive_group(required=True)
    src.add_argument("--x", nargs="+", metavar="V", help="values in natural units "
                     "(of x; of y with --inverse)")
    src.add_argument("--from", dest="from_file", metavar="FILE.csv",
                     help="a table with a column named as data.x (data.y with --inverse; "
                          "every data.x column for several predictors)")
    pred.add_argument("--group", metavar="G", help="use the fit of this group")
    pred.add_argument("--method", metavar="M", help="line method (default: ols, the line "
                      "that predicts y from x, when the run fitted it; else the run's first)")
    pred.add_argument("--inverse", action="store_true", help="predict x from y values")
    pred.add_argument("--correction", metavar="C", help="smearing | parametric | ratio | none")
    pred.add_argument("--interval", metavar="I", help="prediction | confidence")
    pred.add_argument("--out", metavar="FILE.csv", help="where to write the table "
                      "(default: predictions.csv in the current folder)")
    pred.add_argument("--force", action="store_true", help="overwrite the output file")
    return p


def _examples() -> list[str]:
    from .io.starter import EXAMPLE_FOLDERS, EXAMPLES
    return sorted(EXAMPLES) + sorted(EXAMPLE_FOLDERS)


# --------------------------------------------------------------------------
# commands


def _fmt(v, digits=3) -> str:
    import math
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return ""
    return f"{v:.{digits}f}"


def _summary_table(result) -> str:
    import numpy as np
    fits = result.fits
    pct = f"{100 * result.config.model.confidence:g}% CI"
    mw = max([6] + [len(str(m)) for m in fits["method"]])
    several = "term" in fits.columns and (fits["term"].astype(str) != "").any()
    head = f"{'scope':<12} {'term' if several else 'group':<14} {'method':<{mw}} {'n':>5} {'slope':>7}  {pct:<17} {'r2':>6}"
    lines = [head, "-" * len(head)]
    for r in fits.itertuples(index=False):
        ci = f"{_fmt(r.slope_low)} to {_fmt(r.slope_high)}" if np.isfinite(r.slope) else r.note
        label = getattr(r, "term", "") if isinstance(getattr(r, "term", ""), str) else ""
        label = label or str(r.group)   # several predictors: the term in the group column
        scope = str(r.group) if several and r.scope == "group" else r.scope   # its name
        lines.append(f"{scope[:12]:<12} {label[:14]:<14} {r.method:<{mw}} {r.n:>5} "
                     f"{_fmt(r.slope):>7}  {ci:<17} {_fmt(r.r2):>6}")
    return "\n".join(lines)


#: glibc's ``mallopt`` parameter (malloc.h): blocks from this many bytes on are
#: mapped on their own and given back to the system when freed.
_M_MMAP_THRESHOLD = -3
#: 4 MB: a column of half a million numbers or more.  By default glibc raises the
#: threshold to the largest block freed so far (up to 32 MB), after which freed columns
#: stay in the heap, where the holes they leave grow the process (about 15 MB more at the
#: peak of a million-row run); a fixed 4 MB costs a few page faults per column (about
#: 0.15 s of system time on a million rows), a smaller one more.
MMAP_THRESHOLD = 4 << 20
#: ``mallopt`` parameter: how many heaps (arenas) threads allocate from.  One: the
#: thread that reads the file ahead (:func:`_read_ahead`) allocates from the main heap,
#: so what it frees is reused there (in an arena of its own the holes it left added
#: about 30 MB to the peak of a million-row run).
_M_ARENA_MAX = -8


def _give_back_freed_memory() -> None:
    """Let the run's process return freed columns to the system (``scaling run`` only:
    importing the library changes nothing).

    Large blocks of glibc's malloc are mapped on their own (:data:`MMAP_THRESHOLD`), and
    Arrow (pandas' text columns, the CSV reader) allocates with the system allocator
    instead of its own pool, which keeps what it frees.  Neither changes a number; on
    another C library, or without pyarrow, nothing is done.
    """
    if sys.platform.startswith("linux"):
        import ctypes
        try:
            libc = ctypes.CDLL("libc.so.6")
            libc.mallopt(_M_MMAP_THRESHOLD, MMAP_THRESHOLD)
            libc.mallopt(_M_ARENA_MAX, 1)
        except (OSError, AttributeError):   # not glibc
            pass
    try:
        import pyarrow
    except ImportError:
        return
    pyarrow.set_memory_pool(pyarrow.system_memory_pool())


def _read_ahead(config_path) -> None:
    """Start reading the data file of the config at ``config_path`` in a thread, when the
    run will read it whole with pyarrow (:func:`scaling.io.fast_csv.read_ahead`), while
    the modules the run needs are imported (about half a second).  Anything amiss is
    left to the run, which reads, checks and reports as ever."""
    try:
        from .io.config import load_config
        from .io.fast_csv import plain_columns_args, read_ahead
        cfg = load_config(config_path)
        path = Path(cfg.data.file)
        if cfg.engine == "dask" or not path.is_file():
            return
        if path.stat().st_size / 2**20 > cfg.data.moments_above_mb:   # read in chunks
            return
        args = plain_columns_args(cfg.data)
        if args is not None:
            read_ahead(path, **args)
    except Exception:  # noqa: BLE001 -- the run reports any of it in its own words
        return


def _cmd_run(args) -> int:
    _give_back_freed_memory()
    _read_ahead(args.config)
    try:
        from .run.pipeline import run_config
    finally:   # nothing reads on while the process ends (an import failed)
        from .io.fast_csv import settle_reads
        settle_reads()
    out = Path(args.out) if args.out else None
    result = run_config(args.config, out=out, force=args.force, quiet=args.quiet)
    if not args.quiet:
        print(f"scaling {__version__}: {result.config.title}")
        from .render.answer import headline_of
        head = headline_of(result)
        for line in head.sentences:    # the answer first
            print(line)
        if head.group_table is not None and len(head.group_table):
            print(head.group_table.to_string(index=False, float_format="%.3f"))
        print()
        for line in result.messages:
            if not line.startswith("  The ") and line not in head.sentences:   # said once
                print(line)
        print()
        print(_summary_table(result))
        for w in result.warnings:
            print(f"note: {w}")
        print()
        print(f"wrote {len(result.files)} files to {result.out_dir}")
        for f in result.files:
            if f.suffix in (".html",) or f.parent.name == "figures":
                print(f"  {f}")
    return 0


def _cmd_check(args) -> int:
    from .io.config import load_config
    from .io.tables import load_data
    from .stats.lines import MIN_N, parse_log_base
    import warnings
    from .errors import ScalingWarning
    cfg = load_config(args.config)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", ScalingWarning)
        data = load_data(cfg.data, log_base=parse_log_base(cfg.model.log_base))
    _refuse_unfittable(cfg, data)
    pts = data.points
    print(f"config OK: {args.config}")
    print(f"data OK: {cfg.data.file}")
    print(f"  {data.n_read} data rows read, {len(data.dropped)} dropped, {len(pts)} points to fit"
          + (f" ({cfg.data.average_within} means)" if data.averaged_within else ""))
    if len(data.dropped):
        # Every reason, most frequent first, with the rows it removed (INTERFACE numbering).
        by_reason = data.dropped.groupby("reason", sort=False)["row"].agg(list)
        by_reason = by_reason.loc[data.dropped["reason"].value_counts().index]
        for reason, rows in by_reason.items():
            shown = ", ".join(str(r) for r in rows[:5]) + (", ..." if len(rows) > 5 else "")
            word = "row" if len(rows) == 1 else "rows"
            print(f"    {len(rows):>4} × {reason} ({word} {shown})")
    if data.has_groups:
        counts = pts["group"].value_counts().sort_index()
        print(f"  {len(counts)} groups: " + ", ".join(f"{g} (n = {n})" for g, n in counts.items()))
        small = [g for g, n in counts.items() if n < MIN_N]
        if small:
            print(f"  note: group fits will be skipped for n < {MIN_N}: {', '.join(small)}")
    if isinstance(cfg.data.x, tuple):   # several predictors: each one's range
        print("  " + "; ".join(f"{name} range {pts[f'x{j}'].min():.4g} to "
                               f"{pts[f'x{j}'].max():.4g}" for j, name in enumerate(cfg.data.x))
              + f"; y range {pts['y'].min():.4g} to {pts['y'].max():.4g}")
    else:
        print(f"  x range {pts['x'].min():.4g} to {pts['x'].max():.4g}"
              f"; y range {pts['y'].min():.4g} to {pts['y'].max():.4g}")
    for w in caught:
        if issubclass(w.category, ScalingWarning):
            print(f"  note: {w.message}")
    if cfg.data.tree is not None and not isinstance(cfg.data.x, tuple):
        from .run.phylogeny import tree_check_lines
        for line in tree_check_lines(cfg, pts):
            print(line)
    print(f"  output folder: {cfg.output.dir}")
    return 0


def _refuse_unfittable(cfg, data) -> None:
    """Refuse, with the run's own line, data on which ``scaling run`` can fit no line.

    The run's rules are applied, not restated: the notes of the pooled OLS line
    (too few points, x or y constant: every other line and group then fails too)
    and the run's message; for several predictors the checks of the OLS fit itself.
    """
    from .errors import DataError
    if isinstance(cfg.data.x, tuple):
        from .stats.several_predictors import fit_multi
        pts, names = data.points, cfg.data.x_columns
        k = len(names)
        if len(pts) < k + 2:   # the run's message (run.several_predictors)
            raise DataError(f"{cfg.data.file}: {k} predictors need at least {k + 2} usable "
                            f"rows, got {len(pts)}")
        fit_multi({n: pts[f"x{j}"].to_numpy() for j, n in enumerate(names)},
                  pts["y"].to_numpy(), log_base=cfg.model.log_base)
        return
    from .run.fits import nothing_estimable
    from .stats.lines import fit_notes
    from .stats.moments import moments
    pts = data.points
    note = fit_notes(moments(pts["log_x"].to_numpy(), pts["log_y"].to_numpy()), "ols")[0]
    if note:
        raise DataError(nothing_estimable(cfg, pts, [{"scope": "pooled", "note": note}],
                                          len(data.dropped)))


def _cmd_init(args) -> int:
    from .errors import ConfigError, OutputError
    from .io.starter import EXAMPLE_FOLDERS, EXAMPLES
    if args.example in EXAMPLE_FOLDERS:   # a worked example: config(s) and data into a folder
        return _init_example(args)
    if args.example not in EXAMPLES:
        import difflib
        close = difflib.get_close_matches(args.example, _examples(), n=1)
        hint = f"; did you mean '{close[0]}'?" if close else ""
        raise ConfigError(f"--example: no starter named '{args.example}'{hint} "
                          f"(choose from {', '.join(_examples())})")
    path = Path(args.path)
    if path.exists() and not args.force:
        raise OutputError(f"{path}: already exists; use --force to overwrite it")
    if path.parent and not path.parent.exists():
        raise OutputError(f"{path.parent}: folder does not exist")
    path.write_text(EXAMPLES[args.example], encoding="utf-8")
    print(f"wrote {path}: edit data.file, data.x and data.y, then run 'scaling check {path}'")
    return 0


def _init_example(args) -> int:
    from .errors import OutputError
    from .io.starter import EXAMPLE_FOLDERS, example_files
    folder = Path(args.path)
    if folder.exists() and not folder.is_dir():
        raise OutputError(f"{folder}: exists and is not a folder (--example {args.example} "
                          "writes a folder: its config and data)")
    files = example_files(args.example)
    clash = [n for n in files if (folder / n).exists()]
    if clash and not args.force:
        raise OutputError(f"{folder / clash[0]}: already exists; use --force to overwrite it")
    if not folder.parent.exists():
        raise OutputError(f"{folder.parent}: folder does not exist")
    folder.mkdir(exist_ok=True)
    for name, content in files.items():
        (folder / name).write_bytes(content)
    configs = EXAMPLE_FOLDERS[args.example]
    print(f"wrote the {args.example} example to {folder}: " + ", ".join(sorted(files)))
    for c in configs:
        print(f"  run it with: scaling run {folder / c}")
    return 0


def _cmd_predict(args) -> int:
    from .run.saved_predictions import predict_command
    return predict_command(args)


_COMMANDS = {"run": _cmd_run, "check": _cmd_check, "init": _cmd_init, "predict": _cmd_predict}


def main(argv: list[str] | None = None) -> int:
    """Run the command line; return the exit code (0, 1 or 2)."""
    parser = _build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # --help, --version, or a syntax error (already printed)
        return int(exc.code or 0)
    if args.command is None:
        parser.print_help(sys.stderr)
        return 2
    debug = args.debug or os.environ.get("SCALING_DEBUG") == "1"
    try:
        return _COMMANDS[args.command](args)
    except ScalingError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("error: interrupted", file=sys.stderr)
        return 2
    except Exception as exc:  # a bug: say so plainly
        if debug:
            traceback.print_exc()
        print(f"internal error: {type(exc).__name__}: {exc} (this is a bug in scaling; "
              "rerun with --debug for the traceback)", file=sys.stderr)
        return 1


def entry_point() -> None:
    sys.exit(main())
