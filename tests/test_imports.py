"""Start-up imports: the run path must not load scipy's heavy subpackages.

scipy.integrate, scipy.optimize and scipy.interpolate (with scipy.linalg and scipy.sparse
behind them) cost ~0.3-0.5 s of import time; icgen's run path uses its own numpy helpers
(icgen._collocation, icgen._interp, icgen._roots) instead. scipy.special is not checked:
scipy.fft itself imports it (scipy 1.17, through scipy.fft._fftlog).

Each check runs a fresh interpreter (sys.modules of this test process is polluted by the
other tests).
"""

import subprocess
import sys

import pytest

HEAVY = ("scipy.integrate", "scipy.optimize", "scipy.interpolate", "scipy.linalg", "scipy.sparse")


@pytest.mark.parametrize("module", ["icgen.cli.cmd_ics", "icgen.background", "icgen.spectrum",
                                    "icgen.schedule", "icgen.start", "icgen.pipeline"])
def test_run_path_does_not_import_heavy_scipy(module):
    code = (f"import sys, {module}; "
            f"print(sorted(m for m in sys.modules if m.startswith({HEAVY!r})))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]", out.stdout


@pytest.mark.parametrize("module", ["icgen.cli.cmd_ics", "icgen.pipeline", "icgen.particles", "icgen.field",
                                    "icgen.io_hdf5", "icgen.start"])
def test_set_up_path_loads_neither_numba_nor_scipy_fft(module):
    # icgen ics creates its output file before numba and scipy.fft load, so the file's pages are
    # prepared on the idle core meanwhile (io_hdf5._PagePrefetch; DEVELOPERS.md, start-up order).
    code = (f"import sys, {module}; "
            f"print(sorted(m for m in sys.modules if m in ('numba', 'scipy.fft')))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]", out.stdout
