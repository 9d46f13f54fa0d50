"""Command line: ``python -m workbench lab [--port N] [--no-browser]`` and
``python -m workbench figures SCENARIO.toml --out DIR [--formats png,svg,pdf,html]``.

``lab`` starts JupyterLab on the repository's ``notebooks/`` folder, bound to 127.0.0.1 and protected by a
fresh random token, opening the setpoint-design notebook, and prints the URL (with the token) to open.
``figures`` computes a scenario's figure pack (figures with captions, tables, cautions, sources) and writes it
into DIR, printing each file written; a bad scenario or option prints the message (field, value, what is
allowed) and exits with status 2; a missing browser for PNG/SVG/PDF exits with status 1.
Subcommands are registered in :func:`build_parser`.
Heavy packages (JupyterLab, plotly, ipywidgets) are imported only inside the subcommand that needs them.
"""

from __future__ import annotations

import argparse
import os
import secrets
import socket
import sys
from collections.abc import Sequence

from workbench._paths import notebooks_dir

HOST = "127.0.0.1"
START_NOTEBOOK = "setpoint.ipynb"


def _free_port(host: str = HOST) -> int:
    """A TCP port that is free on ``host`` right now (the OS picks it)."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind((host, 0))
        return sock.getsockname()[1]


def lab_argv(port: int, token: str, root_dir: str, *, open_browser: bool, as_root: bool) -> list[str]:
    """JupyterLab command-line options for the workbench server (never without a token)."""
    if not token:
        raise ValueError("token: got an empty token; a JupyterLab server is never started without one")
    argv = [
        f"--ServerApp.ip={HOST}",
        f"--ServerApp.port={port}",
        "--ServerApp.port_retries=0",  # the printed URL must be the one served: fail rather than move port
        f"--ServerApp.root_dir={root_dir}",
        f"--IdentityProvider.token={token}",
        f"--LabApp.default_url=/lab/tree/{START_NOTEBOOK}",
        f"--ServerApp.open_browser={open_browser}",
    ]
    if as_root:
        argv.append("--allow-root")
    return argv


def _run_lab(args: argparse.Namespace) -> int:
    """Start JupyterLab in this process (so the token never appears in a process listing)."""
    try:
        root = notebooks_dir()
    except FileNotFoundError as exc:
        print(f"workbench lab: {exc}", file=sys.stderr)
        return 2
    if not (root / START_NOTEBOOK).is_file():
        print(f"workbench lab: note: {START_NOTEBOOK} not found in {root}; JupyterLab opens without it")
    port = args.port if args.port is not None else _free_port()
    token = secrets.token_urlsafe(32)
    as_root = hasattr(os, "geteuid") and os.geteuid() == 0
    argv = lab_argv(port, token, str(root), open_browser=not args.no_browser, as_root=as_root)
    # Kernels inherit this environment; without bytecode every import would recompile at each start.
    os.environ.pop("PYTHONDONTWRITEBYTECODE", None)
    sys.dont_write_bytecode = False
    print(f"Workbench: http://{HOST}:{port}/lab/tree/{START_NOTEBOOK}?token={token}", flush=True)
    print("Stop with Ctrl+C (twice).", flush=True)

    from jupyterlab.labapp import LabApp  # heavy: only when the server is really started

    LabApp.launch_instance(argv=argv)
    return 0


def _run_figures(args: argparse.Namespace) -> int:
    """Write a scenario's figure pack into ``args.out``; print the files written."""
    from workbench.errors import InputError
    from workbench.export import (
        ExportError,
        check_formats,
        export_figure_pack,
    )  # heavy: only for this command
    from workbench.scenario import read_scenario

    try:
        formats = check_formats(args.formats)
        scenario = read_scenario(args.scenario)
        if scenario.uncertainty.samples:
            print(
                f"workbench figures: Monte Carlo with {scenario.uncertainty.samples} samples; this takes a while",
                file=sys.stderr,
                flush=True,
            )
        written = export_figure_pack(scenario, args.out, formats=formats)
    except InputError as exc:
        print(f"workbench figures: {exc}", file=sys.stderr)
        return 2
    except ExportError as exc:
        print(f"workbench figures: {exc}", file=sys.stderr)
        return 1
    for path in written:
        print(path)
    return 0


def _port(text: str) -> int:
    """argparse type: a TCP port number 1-65535."""
    try:
        port = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"port: got {text!r}; allowed: an integer 1-65535") from None
    if not 1 <= port <= 65535:
        raise argparse.ArgumentTypeError(f"port: got {port}; allowed: an integer 1-65535")
    return port


def build_parser() -> argparse.ArgumentParser:
    """The ``python -m workbench`` parser with one subparser per subcommand."""
    parser = argparse.ArgumentParser(prog="python -m workbench", description=__doc__.splitlines()[0])
    commands = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    lab = commands.add_parser("lab", help="start JupyterLab on the workbench notebooks (127.0.0.1, token)")
    lab.add_argument("--port", type=_port, default=None, help="TCP port (default: a free one)")
    lab.add_argument("--no-browser", action="store_true", help="do not open a web browser")
    lab.set_defaults(handler=_run_lab)

    figures = commands.add_parser(
        "figures", help="write a scenario's figures (PNG, SVG, PDF, HTML), tables, cautions and sources"
    )
    figures.add_argument("scenario", help="scenario file (.toml, the workbench's own schema)")
    figures.add_argument("--out", required=True, help="folder to write into (created if needed)")
    figures.add_argument(
        "--formats",
        default="png,svg,pdf,html",
        help="comma-separated figure formats (default: png,svg,pdf,html)",
    )
    figures.set_defaults(handler=_run_figures)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of ``python -m workbench``; returns the process exit status."""
    args = build_parser().parse_args(argv)
    return args.handler(args)


if __name__ == "__main__":
    sys.exit(main())
