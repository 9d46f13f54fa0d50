"""Command line: ``python -m workbench lab [--port N] [--no-browser]``,
``python -m workbench figures SCENARIO.toml --out DIR [--formats png,svg,pdf,html] [--overwrite]`` and
``python -m workbench demo DIR``.

``lab`` starts JupyterLab on the repository's ``notebooks/`` folder, bound to 127.0.0.1 and protected by a
fresh random token, opening the setpoint-design notebook, and prints the URL (with the token) to open once the
server answers.
``figures`` computes a scenario's figure pack (figures with captions, tables, cautions, sources) and writes it
into DIR, printing each file written. DIR must be new, empty, or a folder an earlier pack wrote (whose unchanged
files it replaces); ``--overwrite`` replaces other files in the way; the scenario read is never replaced. DIR is
checked (created, writable, nothing in the way) before anything is computed. A bad scenario, option or output
folder, or a failure to write, prints the message (field, value, what is allowed) and exits with status 2; a
missing browser for PNG/SVG/PDF exits with status 1. No traceback for any of them.
``demo`` copies the demo scenario and the demo jar-test file (an invented plant) into DIR, created if needed, so
that an installed copy has files to start from; it never replaces a file that differs (exit status 2).
Subcommands are registered in :func:`build_parser`.
Heavy packages (JupyterLab, plotly, ipywidgets) are imported only inside the subcommand that needs them.
"""

from __future__ import annotations

import argparse
import os
import secrets
import socket
import sys
import tempfile
import threading
import time
import urllib.error
import urllib.request
from collections.abc import Sequence
from pathlib import Path

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
    print(
        f"Workbench: starting JupyterLab on {HOST}:{port}; its address follows once it answers.", flush=True
    )
    url = f"http://{HOST}:{port}/lab/tree/{START_NOTEBOOK}?token={token}"
    threading.Thread(target=_announce_when_answering, args=(port, url), daemon=True).start()

    from jupyter_client.kernelspec import KernelSpecManager  # heavy: only when the server is really started
    from jupyterlab.labapp import LabApp

    from workbench.widgets.warm import kernel_dir

    # the notebooks' python3 kernel, warmed at start (workbench.widgets.warm), for this server only
    with tempfile.TemporaryDirectory(prefix="workbench-kernel-") as folder:
        native = KernelSpecManager().get_kernel_spec("python3").to_dict()
        kernel_dir(Path(folder), native)
        os.environ["JUPYTER_PATH"] = os.pathsep.join(p for p in (folder, os.environ.get("JUPYTER_PATH")) if p)
        LabApp.launch_instance(argv=argv)
    return 0


def _announce_when_answering(port: int, url: str, *, timeout_s: float = 300.0) -> bool:
    """Print the address once the server answers on ``port`` (its ``/api`` status page); returns whether it
    did within ``timeout_s``."""
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        try:
            with urllib.request.urlopen(f"http://{HOST}:{port}/api", timeout=2) as reply:
                if reply.status == 200:
                    print(f"Workbench: {url}", flush=True)
                    print("Stop with Ctrl+C (twice).", flush=True)
                    return True
        except (urllib.error.URLError, OSError):
            pass
        time.sleep(0.2)
    print(
        f"workbench lab: the server did not answer on {HOST}:{port} within {timeout_s:.0f} s", file=sys.stderr
    )
    return False


def _run_demo(args: argparse.Namespace) -> int:
    """Copy the demo scenario and jar-test file into ``args.dir``; print each file written."""
    from workbench.scenario import demo_scenario_path
    from workbench.treatment.jar_tests import demo_jar_tests_path

    out = Path(args.dir)
    sources = [demo_scenario_path(), demo_jar_tests_path()]
    if out.exists() and not out.is_dir():
        print(f"workbench demo: {out} is a file; a folder is required", file=sys.stderr)
        return 2
    clashes = [
        out / s.name
        for s in sources
        if (out / s.name).exists() and (out / s.name).read_bytes() != s.read_bytes()
    ]
    if clashes:
        print(
            f"workbench demo: {', '.join(map(str, clashes))} already exists and differs; nothing was copied "
            "(move it away or choose another folder)",
            file=sys.stderr,
        )
        return 2
    out.mkdir(parents=True, exist_ok=True)
    for source in sources:
        target = out / source.name
        if not target.exists():
            with open(target, "xb") as f:  # never replaces a file
                f.write(source.read_bytes())
        print(target)
    scenario = out / sources[0].name
    print(
        f"Next: python -m workbench figures {scenario} --out {out / 'figure_pack'}   "
        f"(or in a notebook: SetpointPanel(read_scenario({str(scenario)!r})))",
        flush=True,
    )
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
        written = export_figure_pack(
            scenario, args.out, formats=formats, overwrite=args.overwrite, keep=[args.scenario]
        )
    except InputError as exc:
        print(f"workbench figures: {exc}", file=sys.stderr)
        return 2
    except ExportError as exc:
        print(f"workbench figures: {exc}", file=sys.stderr)
        return 1
    except OSError as exc:  # e.g. the disk filled up while writing: every file is written whole or not at all
        where = exc.filename or args.out
        print(f"workbench figures: writing {where} failed: {exc.strerror or exc}", file=sys.stderr)
        return 2
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
        "--overwrite",
        action="store_true",
        help="replace files in the way that no earlier pack wrote (never the scenario read)",
    )
    figures.add_argument(
        "--formats",
        default="png,svg,pdf,html",
        help="comma-separated figure formats (default: png,svg,pdf,html)",
    )
    figures.set_defaults(handler=_run_figures)

    demo = commands.add_parser(
        "demo",
        help="copy the demo scenario and jar-test file (an invented plant) into a folder to start from",
    )
    demo.add_argument("dir", help="folder to copy into (created if needed; no differing file is replaced)")
    demo.set_defaults(handler=_run_demo)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of ``python -m workbench``; returns the process exit status."""
    args = build_parser().parse_args(argv)
    return args.handler(args)


if __name__ == "__main__":
    sys.exit(main())
