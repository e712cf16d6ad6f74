"""The command line: the only place that prints and picks exit codes.

Exit status of ``sitegen build`` (contract): 0 every dataset fitted (warnings
allowed); 1 the site was written but at least one dataset failed; 2 nothing was
written (usage or configuration error, or an unsafe output folder); with
``--enforce``, 3 the site was written, no dataset failed, and at least one
declared requirement is not met (1 still wins when a dataset failed).
"""

from __future__ import annotations

import argparse
import contextlib
import os
import sys
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any, NoReturn, TextIO

from sitegen import __version__
from sitegen.errors import BuildLockedError, ConfigError, SitegenError

EXIT_OK, EXIT_DATASET_FAILED, EXIT_NOTHING_WRITTEN, EXIT_REQUIREMENT_UNMET = 0, 1, 2, 3
DEFAULT_MAIL_BUDGET_MB = 20.0


def printable(text: str) -> str:
    """``text`` with every control character (C0, DEL, C1, and the bidirectional-text controls that can
    reorder what a terminal shows) written as an escape such as ``\\x1b``: file names and cells come from
    an untrusted folder, and must not move the cursor, change colours or retitle the terminal."""
    if text.isprintable():
        return text
    return "".join(ch if ch.isprintable() or ch == " " else _escape(ch) for ch in text)


def _escape(ch: str) -> str:
    code = ord(ch)
    return f"\\x{code:02x}" if code < 0x100 else f"\\u{code:04x}" if code < 0x10000 else f"\\U{code:08x}"


class _Printer:
    """Messages to stderr, with colour and a progress bar only on a terminal; every text is made
    :func:`printable` first."""

    def __init__(self, stream: TextIO, quiet: bool) -> None:
        self.stream = stream
        self.quiet = quiet
        self.tty = stream.isatty()
        self.color = (self.tty and "NO_COLOR" not in os.environ) or "FORCE_COLOR" in os.environ

    def _paint(self, text: str, code: str) -> str:
        return f"\033[{code}m{text}\033[0m" if self.color else text

    def error(self, text: str) -> None:
        print(f"{self._paint('error', '1;31')}: {printable(text)}", file=self.stream)

    def warn(self, text: str) -> None:
        if not self.quiet:
            print(f"{self._paint('warning', '1;33')}: {printable(text)}", file=self.stream)

    def info(self, text: str) -> None:
        if not self.quiet:
            print(printable(text), file=self.stream)

    def progress(self, done: int, total: int, name: str) -> None:
        if self.quiet or total == 0:
            return
        name = printable(name)
        if self.tty:
            width = 28
            filled = int(width * done / total)
            bar = "█" * filled + "·" * (width - filled)
            print(f"\r[{bar}] {done}/{total} {name[-40:]:<40}", end="", file=self.stream, flush=True)
            if done == total:
                print("\r" + " " * (width + 55) + "\r", end="", file=self.stream)
        elif name:
            print(f"done {done}/{total}: {name}", file=self.stream)


class _Help(argparse.HelpFormatter):
    """Help as wide as the terminal, measured without importing shutil (argparse's default does, for every
    parser, even when no help is shown)."""

    def __init__(self, prog: str) -> None:
        try:
            columns = int(os.environ["COLUMNS"])
        except (KeyError, ValueError):
            columns = 0
        if columns <= 0:  # unset or nonsense: the terminal's width, else 80 (as shutil.get_terminal_size)
            try:
                columns = os.get_terminal_size(sys.__stdout__.fileno()).columns if sys.__stdout__ else 80
            except (AttributeError, ValueError, OSError):
                columns = 80
        super().__init__(prog, width=max(columns, 40) - 2)


class _Parser(argparse.ArgumentParser):
    """An argument parser with :class:`_Help`; its subcommands' parsers are of this class too."""

    def __init__(self, **kwargs: Any) -> None:
        super().__init__(formatter_class=_Help, **kwargs)


def _parser() -> argparse.ArgumentParser:
    p = _Parser(
        prog="sitegen",
        description="Fit straight lines to a folder of CSV datasets and publish the results as a static web site.",
    )
    p.add_argument("--version", action="version", version=f"sitegen {__version__}")
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND")
    b = sub.add_parser("build", help="build (or rebuild) a site from a data folder")
    b.add_argument("data_dir", type=Path, metavar="DATA_DIR")
    b.add_argument("-o", "--output", type=Path, required=True, metavar="SITE_DIR", dest="out_dir")
    _common_build_options(b)
    w = sub.add_parser("watch", help="rebuild whenever files in the data folder change")
    w.add_argument("data_dir", type=Path, metavar="DATA_DIR")
    w.add_argument("-o", "--output", type=Path, required=True, metavar="SITE_DIR", dest="out_dir")
    w.add_argument(
        "--interval", type=_positive_seconds, default=1.0, help="seconds between looks at the folder (default 1)"
    )
    w.add_argument(
        "--settle", type=_positive_seconds, default=1.5, help="quiet seconds before a rebuild starts (default 1.5)"
    )
    w.add_argument("--max-builds", type=int, default=None, help=argparse.SUPPRESS)
    _common_build_options(w)
    k = sub.add_parser(
        "pack",
        help="zip a built site for e-mail or a file share (or, with -o NAME.html, one single HTML file)",
    )
    k.add_argument("site_dir", type=Path, metavar="SITE_DIR")
    k.add_argument("-o", "--output", type=Path, required=True, metavar="FILE.zip|FILE.html", dest="target")
    k.add_argument(
        "--budget-mb",
        type=float,
        default=None,
        help="warn when the zip is larger than this many MB (default: site.toml's mail_budget_megabytes, "
        f"else {DEFAULT_MAIL_BUDGET_MB:g})",
    )
    v = sub.add_parser("preview", help="serve a built site on http://127.0.0.1 for a quick look")
    v.add_argument("site_dir", type=Path, metavar="SITE_DIR")
    v.add_argument("--port", type=_port, default=8000, help="port to listen on (default 8000; 0 picks a free one)")
    for sub_parser in (k, v):
        sub_parser.add_argument("--debug", action="store_true", help="show tracebacks of internal errors")
    return p


def _positive_seconds(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number of seconds") from None
    if not 0 < value <= 3600:
        raise argparse.ArgumentTypeError("give a number of seconds above 0 and at most 3600")
    return value


def _port(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a port number") from None
    if not 0 <= value <= 65535:
        raise argparse.ArgumentTypeError("a port is a whole number from 0 to 65535 (0 picks a free one)")
    return value


def _common_build_options(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "-j", "--jobs", type=int, default=None, help="worker processes (default: all cores; at most 2 per core)"
    )
    p.add_argument("--refit", action="store_true", help="fit every dataset again, ignoring stored results")
    p.add_argument("-q", "--quiet", action="store_true", help="print only errors")
    p.add_argument("--debug", action="store_true", help="show tracebacks of internal errors")
    p.add_argument(
        "--enforce",
        action="store_true",
        help="exit with 3 when a declared requirement is not met (1 still wins when a dataset failed)",
    )
    p.add_argument(
        "--cluster",
        default=None,
        metavar="ADDRESS",
        help="run the work on an existing Dask cluster (tcp://HOST:PORT of its scheduler); every worker must see "
        "DATA_DIR and SITE_DIR's parent at the same absolute paths (needs the 'cluster' extra)",
    )
    p.add_argument(
        "--theme",
        type=Path,
        default=None,
        metavar="FOLDER",
        help="a theme folder you trust, used instead of site.toml's theme; it may lie outside the data folder",
    )


def _build(args: argparse.Namespace, out: _Printer) -> int:
    from sitegen.build import BuildOptions, run_build  # noqa: PLC0415 - keeps --help fast

    if args.jobs is not None and args.jobs < 1:
        raise ConfigError("--jobs must be at least 1")
    summary = run_build(
        BuildOptions(args.data_dir, args.out_dir, args.jobs, args.refit, theme=args.theme, cluster=args.cluster),
        progress=out.progress,
    )
    for w in summary.warnings:
        out.warn(w)
    for o in summary.outcomes:
        for text in o.sidecar_warnings:
            out.warn(text)
        sidecar = o.source[: -len(".csv")] + ".toml"
        if o.status == "error":
            if o.message.startswith(sidecar):  # the fault is in the sidecar: it leads, the dataset follows
                out.error(f"{o.message} (dataset {o.source} was not fitted)")
            else:
                out.error(o.message if o.source in o.message else f"{o.source}: {o.message}")
        elif o.requirements == "unmet":
            out.warn(f"{o.source}: a declared requirement is not met; see its page")
    if args.debug:
        for kept in summary.debug_traces:
            print(f"--- traceback for {printable(kept.source)} ---\n{kept.trace}", file=out.stream)
    n = len(summary.outcomes)
    out.info(
        f"Built {summary.out_dir}/index.html: {n} dataset{'s' if n != 1 else ''} — {summary.fitted} fitted, "
        f"{summary.reused} reused, {summary.warned} with warnings, {summary.errors} failed, "
        f"in {summary.seconds:.1f} s" + (f"; {summary.unmet} with a requirement not met" if summary.unmet else "")
    )
    if summary.errors:
        return EXIT_DATASET_FAILED
    if getattr(args, "enforce", False) and summary.unmet:
        return EXIT_REQUIREMENT_UNMET
    return EXIT_OK


def _watch(args: argparse.Namespace, out: _Printer) -> int:
    from sitegen.watch import RETRY, watch  # noqa: PLC0415

    def once() -> int:
        try:
            return _build(args, out)
        except BuildLockedError as exc:
            out.error(f"{exc}; trying again shortly")
            return RETRY
        except SitegenError as exc:  # e.g. a broken site.toml or theme: fix it and save, the watch goes on
            out.error(str(exc))
            return EXIT_NOTHING_WRITTEN
        except Exception:
            if args.debug:
                import traceback  # noqa: PLC0415 - only --debug prints one

                traceback.print_exc(file=out.stream)
            out.error("the build hit an internal error; the published site is unchanged (run with --debug)")
            return EXIT_NOTHING_WRITTEN

    # The first build runs as a plain build: a usage or configuration error stops here (exit 2).
    first = _build(args, out)
    out.info(f"Watching {args.data_dir} (Ctrl+C to stop)")
    try:
        watch(
            args.data_dir,
            once,
            interval=args.interval,
            settle=args.settle,
            max_builds=args.max_builds,
        )
    except KeyboardInterrupt:
        out.info("Stopped watching.")
    return first


def _pack(args: argparse.Namespace, out: _Printer) -> int:

    from sitegen.publish import pack  # noqa: PLC0415

    if args.target.suffix.lower() in (".html", ".htm"):
        from sitegen.single import write_single_file  # noqa: PLC0415

        size = write_single_file(args.site_dir, args.target)
    else:
        size = pack(args.site_dir, args.target)
    budget = args.budget_mb
    if budget is None:
        budget = DEFAULT_MAIL_BUDGET_MB
        from sitegen.records import read_record  # noqa: PLC0415

        with contextlib.suppress(OSError, ValueError):
            budget = read_record(args.site_dir / "build.json")[0].mail_budget_megabytes
    out.info(f"Packed {args.site_dir} into {args.target}: {size / 1e6:.2f} MB")
    if size > budget * 1e6:
        out.warn(
            f"the zip is larger than {budget:g} MB, more than many mail systems accept; "
            "share it on a file server instead, or leave large datasets out"
        )
    return EXIT_OK


def _preview(args: argparse.Namespace, out: _Printer) -> int:
    from sitegen.preview import serve  # noqa: PLC0415

    def announce(url: str) -> None:
        out.info(f"Serving {args.site_dir} at {url} (Ctrl+C to stop)")

    try:
        serve(args.site_dir, args.port, announce)
    except KeyboardInterrupt:
        out.info("Stopped.")
    return EXIT_OK


_COMMANDS: dict[str, Callable[[argparse.Namespace, _Printer], int]] = {
    "build": _build,
    "watch": _watch,
    "pack": _pack,
    "preview": _preview,
}


def main(argv: Sequence[str] | None = None, stream: TextIO | None = None) -> int:
    """Run a command; returns the exit status (tests call this directly)."""
    stream = stream or sys.stderr
    parser = _parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # argparse has printed its usage message
        return EXIT_NOTHING_WRITTEN if exc.code else EXIT_OK
    out = _Printer(stream, getattr(args, "quiet", False))
    try:
        return _COMMANDS[args.command](args, out)
    except SitegenError as exc:
        out.error(str(exc))
        return EXIT_NOTHING_WRITTEN
    except OSError as exc:
        out.error(f"{exc.strerror or exc}: {exc.filename or ''}".rstrip(": "))
        return EXIT_NOTHING_WRITTEN
    except Exception:
        if getattr(args, "debug", False):
            import traceback  # noqa: PLC0415

            traceback.print_exc(file=stream)
        out.error("sitegen hit an internal error and wrote nothing; run again with --debug and report the output")
        return EXIT_NOTHING_WRITTEN


#: Set for the command-line program before numpy is loaded, unless the user set them: one BLAS thread per
#: process. The datasets are fitted in parallel processes already, and the fits' products are of tall, narrow
#: matrices; on this 2-core machine a million-row fit took 30 % less processor time with one thread (its
#: thread pool waits for cores the other workers hold), bench/large.py.
ONE_THREAD_EACH = ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS")


def entrypoint() -> NoReturn:
    """Console-script entry point."""
    for name in ONE_THREAD_EACH:
        os.environ.setdefault(name, "1")
    sys.exit(main())
