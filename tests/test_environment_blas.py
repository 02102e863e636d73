"""The record's BLAS list names the libraries numpy may use, not whatever another
package loaded later in the process: numba's first compiled count loads SciPy's BLAS
(seen with threadpoolctl on numpy 2.4 / scipy wheels), and the record must be the same
whether the kernel ran in the command's process or in a worker's."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from runner.environment import numpy_uses

SCRIPT = """
import json
import numpy as np
from runner.environment import numeric_environment
from runner.scores import build_scorer
before = numeric_environment()["blas"]
scorer = build_scorer("bic", np.zeros((3, 100), np.uint8), np.full(3, 2, np.int64))
scorer.family(0, (1,))
print(json.dumps([before, numeric_environment()["blas"]]))
"""


def test_numpy_uses_its_own_and_system_libraries_only(tmp_path: Path) -> None:
    site = tmp_path / "site-packages"
    assert numpy_uses(str(site / "numpy.libs" / "libopenblas.so"), site)
    assert numpy_uses(str(site / "numpy" / "_core" / "libx.so"), site)
    assert numpy_uses("/usr/lib/x86_64-linux-gnu/libopenblas.so.0", site)
    assert numpy_uses(None, site)
    assert not numpy_uses(str(site / "scipy.libs" / "libscipy_openblas.so"), site)
    assert not numpy_uses(str(site / "numpyro" / "lib.so"), site)


@pytest.mark.slow
def test_the_blas_list_does_not_change_when_the_kernel_runs() -> None:
    pytest.importorskip("numba")
    done = subprocess.run([sys.executable, "-c", SCRIPT], capture_output=True, text=True,
                          env={"DAGMILL_KERNEL": "numba", "PATH": ""}, check=True)
    before, after = json.loads(done.stdout.strip().splitlines()[-1])
    assert before == after
