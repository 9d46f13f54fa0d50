"""The first compiled solve in a process: the kernel is loaded from numba's cache when it is there; when it is not,
it is compiled in a separate process while the numpy engine serves, and one message says so.

The compile itself is not run here (it takes half a minute; `make install` and `make bench` run it): the tests
pretend the cache is empty and replace the compiling command by a quick one, then check what the user sees."""

from __future__ import annotations

import sys
import threading

import numpy as np
import pytest

from workbench.chemistry import compiled_engine, numpy_engine, solver, tableau


@pytest.fixture
def fresh_process(monkeypatch):
    """compiled_engine as in a process whose installation has no compiled kernel (the cache looks empty)."""
    monkeypatch.setattr(
        compiled_engine, "_STATUS", {"ready": False, "job": None, "failed": None, "seconds": None}
    )
    monkeypatch.setattr(compiled_engine, "is_cached", lambda: False)
    engines = []  # the engine of each solve made by the test (not the compile thread's own solves)

    def spy(name, real):
        def call(*args):
            if threading.current_thread() is threading.main_thread():
                engines.append(name)
            return real(*args)

        return call

    monkeypatch.setattr(numpy_engine, "solve", spy("numpy", numpy_engine.solve))
    monkeypatch.setattr(compiled_engine, "solve", spy("compiled", compiled_engine.solve))
    return engines


def zinc_curve():
    tab = tableau.build(("Zn^2+",), 25.0, "aged")
    t = np.zeros(len(tab.components))
    t[1] = 1e-3
    return solver.solve(tab, t, np.linspace(6.0, 12.0, 61))


def test_without_a_compiled_kernel_the_numpy_engine_serves_and_one_message_says_why(
    fresh_process, monkeypatch, capsys
):
    monkeypatch.setattr(compiled_engine, "COMPILE_COMMAND", (sys.executable, "-c", "pass"))
    first = zinc_curve()
    assert fresh_process == ["numpy"]
    assert compiled_engine.wait_until_ready(
        60
    )  # the quick command, then the kernel loaded from the real cache
    second = zinc_curve()
    assert fresh_process == ["numpy", "compiled"]
    err = capsys.readouterr().err
    assert err.count("workbench:") == 1 and "compiled in the background" in err and "numpy engine" in err
    np.testing.assert_allclose(second.dissolved()[:, 1], first.dissolved()[:, 1], rtol=1e-8)
    assert compiled_engine.status()["seconds"] is not None


def test_a_failed_compile_is_said_once_and_the_numpy_engine_keeps_serving(fresh_process, monkeypatch, capsys):
    monkeypatch.setattr(
        compiled_engine, "COMPILE_COMMAND", (sys.executable, "-c", "raise SystemExit('no compiler here')")
    )
    zinc_curve()
    assert not compiled_engine.wait_until_ready(60)
    zinc_curve()
    assert fresh_process == ["numpy", "numpy"]
    err = capsys.readouterr().err
    assert "could not be compiled (no compiler here)" in err and err.count("could not be compiled") == 1
    assert compiled_engine.status()["failed"] == "no compiler here"


def test_the_cache_check_sees_the_kernel_make_install_compiled():
    assert compiled_engine.is_cached()  # `make install` compiled it; a False here means numba's index moved
