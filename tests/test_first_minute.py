"""What a new user meets first: a quick ``import workbench``, pH grids whose rows can be read by the pH typed, the
demo files for an installed copy, and the JupyterLab address printed only once the server answers."""

from __future__ import annotations

import http.server
import socket
import threading
import time

import numpy as np
import pytest

import workbench as wb
from workbench.__main__ import _announce_when_answering, main
from workbench.scenario import demo_scenario_path, demo_water, read_scenario
from workbench.treatment.jar_tests import demo_jar_tests_path
from workbench.treatment.solubility import ph_index


# ---------------------------------------------------------------------------------------------------- import
def test_every_public_name_resolves_and_is_listed_once():
    assert sorted(wb.__all__) == sorted(wb._SOURCES) and len(set(wb.__all__)) == len(wb.__all__)
    for name in wb.__all__:
        assert getattr(wb, name) is not None and name in dir(wb)
    with pytest.raises(AttributeError, match="no attribute 'Watr'"):
        wb.Watr  # noqa: B018


# ---------------------------------------------------------------------------------------------------- pH index
def test_a_curve_on_an_arange_grid_is_read_by_the_ph_typed():
    grid = np.arange(6.0, 12.01, 0.1)
    assert 9.5 not in grid  # (9.500000000000007: why the labels are cleaned)
    curve = wb.residual_curve(demo_water(), grid)
    row = curve.loc[9.5]
    # the row is the chemistry at the pH given (9.500000000000007), not recomputed at 9.5
    np.testing.assert_array_equal(row.to_numpy(), curve.iloc[35].to_numpy())
    np.testing.assert_allclose(curve.index.to_numpy(), grid, rtol=0, atol=1e-12)
    band = wb.uncertainty_band(demo_water(), grid, samples=2, seed=1)
    assert 9.5 in band.nominal.index and 9.5 in band.upper.index


def test_only_float_noise_near_a_short_decimal_is_dropped_from_the_labels():
    given = np.array([9.500000000000007, 7.25, 4.0357142857142856, 1.0000000000000002, 8.1234567891])
    labels = ph_index(given).to_numpy()
    np.testing.assert_array_equal(labels, [9.5, 7.25, 4.0357142857142856, 1.0, 8.1234567891])
    assert ph_index(given).name == "pH"


# ---------------------------------------------------------------------------------------------------- demo files
def test_demo_copies_the_scenario_and_the_jar_tests_and_never_replaces_a_changed_file(tmp_path, capsys):
    out = tmp_path / "start"
    assert main(["demo", str(out)]) == 0
    for source in (demo_scenario_path(), demo_jar_tests_path()):
        assert (out / source.name).read_bytes() == source.read_bytes()
    assert read_scenario(out / demo_scenario_path().name).name == read_scenario(demo_scenario_path()).name
    assert main(["demo", str(out)]) == 0  # the same files again: nothing to do
    mine = out / demo_jar_tests_path().name
    mine.write_text("jar,reagent\n# my own edits\n", encoding="utf-8")
    assert main(["demo", str(out)]) == 2
    assert mine.read_text(encoding="utf-8") == "jar,reagent\n# my own edits\n"
    assert "already exists and differs" in capsys.readouterr().err


# ---------------------------------------------------------------------------------------------------- lab address
def _free_port() -> int:
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


class _Api(http.server.BaseHTTPRequestHandler):
    def do_GET(self):  # noqa: N802 (the standard library's name)
        self.send_response(200 if self.path == "/api" else 404)
        self.end_headers()
        self.wfile.write(b"{}")

    def log_message(self, *args):
        pass


def test_the_address_is_printed_once_the_server_answers_and_not_before(capsys):
    port = _free_port()
    printed = []
    waiter = threading.Thread(
        target=lambda: printed.append(_announce_when_answering(port, "URL", timeout_s=30))
    )
    waiter.start()
    time.sleep(1.0)
    assert "URL" not in capsys.readouterr().out  # nothing listens yet
    server = http.server.HTTPServer(("127.0.0.1", port), _Api)
    threading.Thread(target=server.serve_forever, daemon=True).start()
    try:
        waiter.join(30)
        assert printed == [True] and "Workbench: URL" in capsys.readouterr().out
    finally:
        server.shutdown()
        server.server_close()


def test_a_server_that_never_answers_is_reported():
    assert _announce_when_answering(_free_port(), "URL", timeout_s=0.5) is False


# ---------------------------------------------------------------------------------------------------- warm kernel
def test_the_lab_servers_python3_kernel_warms_up_at_start(tmp_path, monkeypatch):
    """`python -m workbench lab` puts a python3 kernel of its own first on JUPYTER_PATH: the usual one, running
    warm_up at start."""
    from jupyter_client.kernelspec import KernelSpecManager

    from workbench.widgets import warm

    native = KernelSpecManager().get_kernel_spec("python3").to_dict()
    warm.kernel_dir(tmp_path, native)
    monkeypatch.setenv("JUPYTER_PATH", str(tmp_path))
    spec = KernelSpecManager().get_kernel_spec("python3")
    assert spec.argv[: len(native["argv"])] == native["argv"]
    assert spec.argv[-1] == f"--IPKernelApp.exec_lines={warm.WARM_UP_LINE}"
    assert spec.display_name == native["display_name"]
    exec(warm.WARM_UP_LINE, {})  # what the kernel runs: no error, nothing left behind
    assert warm.warm_up() >= 0.0
