"""Gaussian scores, fitted models and held-out values that depend on the data only: not on
the CPU, the BLAS kernel, the thread count or the order of the rows (issue 12).

References, named beside each check: statsmodels OLS (``llf``, ``bic``, ``params``,
``ssr``), numpy.linalg (``solve``, ``slogdet``) for the accuracy of the fixed-order
routines, Python's ``fractions`` (exact rational arithmetic) for the correctly rounded
statistics, and LDL^T factorizations worked out by hand.
"""

from __future__ import annotations

import json
import math
import os
import subprocess
import sys
from fractions import Fraction
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import runner.scores.fixed_order as fixed_order
from runner.evaluation import gaussian_held_out_fit, held_out_fit
from runner.fit import fit_discrete, fit_gaussian, log_likelihood_rows
from runner.scores import build_gaussian_scorer
from runner.scores.elementary import ln_scalar
from runner.scores.fixed_order import (
    NotPositiveDefinite,
    exact_moments,
    ldl,
    logdet_spd,
    solve_spd,
)
from runner.scores.gaussian import (
    GAUSSIAN_SCORES,
    linear_gaussian_parameters,
    residual_sum_of_squares,
    sufficient_statistics,
)

ROOT = Path(__file__).resolve().parents[1]


def network_data(seed: int, n_vars: int, rows: int, offset: float = 100.0) -> np.ndarray:
    """Correlated data (n_vars x rows) with offsets and scales far from 0 and 1, so that
    float sums over the rows are sensitive to their order. Element-wise arithmetic only
    (no BLAS), so the data are the same under any OpenBLAS setting."""
    rng = np.random.default_rng(seed)
    noise = rng.normal(size=(n_vars, rows)) * rng.uniform(0.1, 10.0, size=(n_vars, 1))
    weights = rng.normal(scale=0.8, size=(n_vars, n_vars))
    values = np.empty((n_vars, rows))
    for v in range(n_vars):
        values[v] = noise[v]
        for p in range(v):
            values[v] += weights[v, p] * noise[p]
    return values + rng.normal(scale=offset, size=(n_vars, 1))


def some_families(n_vars: int, rng: np.random.Generator) -> list[tuple[int, tuple[int, ...]]]:
    """Every child without parents and with all the others, and random parent sets."""
    families: list[tuple[int, tuple[int, ...]]] = [(c, ()) for c in range(n_vars)]
    families += [(c, tuple(v for v in range(n_vars) if v != c)) for c in range(n_vars)]
    for _ in range(2 * n_vars):
        child = int(rng.integers(n_vars))
        others = [v for v in range(n_vars) if v != child]
        size = int(rng.integers(0, len(others) + 1))
        families.append((child, tuple(sorted(int(p) for p in rng.choice(others, size,
                                                                        replace=False)))))
    return families


def relative_gap(a: float, b: float) -> float:
    return abs(a - b) / max(abs(a), abs(b), 1e-300)


# --------------------------------------------------------------------------- statsmodels


@pytest.mark.parametrize("seed", range(6))
def test_loglik_bic_and_parameters_equal_statsmodels_ols(seed: int) -> None:
    """statsmodels 0.14 OLS (reference library): ``llf`` is the log-likelihood at the
    least-squares fit with the ML variance ssr / nobs, so it is our gaussian-loglik family
    score; its ``bic`` is -2 llf + ln(N) (regressors + constant), which does not count the
    variance, so our BIC family score (|Z| + 2 parameters) is -bic / 2 - ln(N) / 2;
    ``params`` are the intercept and coefficients, ``ssr / nobs`` the variance."""
    import statsmodels.api as sm

    values = network_data(seed, 5, 300 + 50 * seed)
    rows = values.shape[1]
    loglik = build_gaussian_scorer("gaussian-loglik", values)
    bic = build_gaussian_scorer("gaussian-bic", values)
    stats = sufficient_statistics(values)
    for child, parents in some_families(5, np.random.default_rng(seed)):
        design = np.column_stack([np.ones(rows), *(values[p] for p in parents)])
        ols = sm.OLS(values[child], design).fit()
        assert relative_gap(loglik.family(child, parents), float(ols.llf)) < 1e-9
        assert relative_gap(bic.family(child, parents),
                            -float(ols.bic) / 2 - math.log(rows) / 2) < 1e-9
        fitted = linear_gaussian_parameters(stats, child, parents)
        scale = float(np.abs(values[child]).max())
        assert abs(fitted.intercept - float(ols.params[0])) <= 1e-9 * max(
            abs(float(ols.params[0])), scale)
        for ours, theirs in zip(fitted.coefficients, ols.params[1:], strict=True):
            assert abs(ours - float(theirs)) <= 1e-9 * max(abs(float(theirs)), 1e-6)
        assert relative_gap(fitted.variance, float(ols.ssr) / rows) < 1e-9


# --------------------------------------------------------------------------- exact statistics


def exact_reference(values: np.ndarray) -> tuple[list[float], list[list[float]]]:
    """Means and scatter about the exact means in Python's exact rationals (fractions),
    rounded once at the end: the correctly rounded values."""
    columns = [[Fraction(v) for v in row] for row in values.tolist()]
    rows = values.shape[1]
    means = [sum(col, Fraction(0)) / rows for col in columns]
    centred = [[v - m for v in col] for col, m in zip(columns, means, strict=True)]
    scatter = [[float(sum((a * b for a, b in zip(ci, cj, strict=True)), Fraction(0)))
                for cj in centred] for ci in centred]
    return [float(m) for m in means], scatter


@pytest.mark.parametrize("case", ["offsets", "wide-range", "zeros-and-one-row", "chunks"])
def test_statistics_are_the_correctly_rounded_exact_values(
        case: str, monkeypatch: pytest.MonkeyPatch) -> None:
    """Reference: exact rational arithmetic (Python's fractions). The means and every
    scatter entry equal the exact value rounded once, bit for bit."""
    rng = np.random.default_rng(4)
    if case == "offsets":
        values = network_data(1, 4, 257, offset=1e4)
    elif case == "wide-range":  # columns spanning many binary orders of magnitude
        values = rng.normal(size=(3, 120)) * np.array([[1e-9], [1.0], [1e12]])
        values[1, :7] = [1e-150, -3e-17, 5e100, 0.0, 2.0**-60, -1.0, 7.5]
    elif case == "zeros-and-one-row":
        values = np.array([[0.0], [1.25], [-3e-300]])
    else:  # many chunks of rows (over 512: int64 partial sums moved to Python integers)
        monkeypatch.setattr(fixed_order, "CHUNK_ROWS", 2)
        values = network_data(2, 3, 1101)
    means, scatter = exact_reference(values)
    stats = sufficient_statistics(values)
    assert stats.means.tolist() == means
    assert stats.scatter.tolist() == scatter


def test_exact_moments_refuse_what_they_cannot_sum_exactly() -> None:
    with pytest.raises(ValueError, match="finite"):
        exact_moments(np.array([[1.0, math.nan]]))
    with pytest.raises(ValueError, match="span"):
        exact_moments(np.array([[1e-300, 1e300]]))


# --------------------------------------------------------------------------- row order


@settings(max_examples=30, deadline=None)
@given(seed=st.integers(0, 2**32 - 1), n_vars=st.integers(2, 6), rows=st.integers(20, 600),
       offset=st.sampled_from([0.0, 1.0, 1e3, 1e6]))
def test_row_order_leaves_scores_and_fitted_parameters_bit_identical(
        seed: int, n_vars: int, rows: int, offset: float) -> None:
    """Property: a permutation of the rows (no holdout, no bootstrap) changes no Gaussian
    family score and no fitted linear-Gaussian parameter, in any bit (==)."""
    values = network_data(seed % 10_000, n_vars, rows, offset)
    rng = np.random.default_rng(seed)
    shuffled = values[:, rng.permutation(rows)]
    families = some_families(n_vars, rng)
    for name in GAUSSIAN_SCORES:
        a = build_gaussian_scorer(name, values)
        b = build_gaussian_scorer(name, shuffled)
        assert [a.family(c, ps) for c, ps in families] == [b.family(c, ps)
                                                           for c, ps in families], name
    sa, sb = sufficient_statistics(values), sufficient_statistics(shuffled)
    assert np.array_equal(sa.means, sb.means) and np.array_equal(sa.scatter, sb.scatter)
    for child, parents in families:
        assert (linear_gaussian_parameters(sa, child, parents)
                == linear_gaussian_parameters(sb, child, parents))
    dag = [tuple(range(c)) for c in range(n_vars)]
    assert fit_gaussian(values, dag) == fit_gaussian(shuffled, dag)


def test_the_demo_learned_on_reversed_rows_stores_the_same_values(tmp_path: Path) -> None:
    """specs/kiln-gauss.yaml through prepare + learn, on the CSV as shipped and with its
    rows reversed: the same score, edges and model.json parameters, bit for bit."""
    from runner.pipeline import learn, prepare

    lines = (ROOT / "datasets" / "kiln-gauss.csv").read_text(encoding="utf-8").splitlines()
    spec = (ROOT / "specs" / "kiln-gauss.yaml").read_text(encoding="utf-8")
    results = []
    for name, rows in (("as-shipped", lines[1:]), ("reversed", lines[:0:-1])):
        data = tmp_path / f"{name}.csv"
        data.write_text("\n".join([lines[0], *rows]) + "\n", encoding="utf-8")
        path = tmp_path / f"{name}.yaml"
        path.write_text(spec.replace("../datasets/kiln-gauss.csv", str(data)), encoding="utf-8")
        record, _ = learn(prepare(path))
        results.append((record["score"]["value"], record["edges"],
                        record["_model"]["variables"]))
    assert results[0] == results[1]


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 2**32 - 1), rows=st.integers(200, 3000))
def test_held_out_totals_do_not_depend_on_the_order_of_the_rows(seed: int, rows: int) -> None:
    """Property: the held-out totals of run.json (learned and empty graph, Gaussian and
    discrete) are the same bits for any order of the learning and the held-out rows."""
    rng = np.random.default_rng(seed)
    values = network_data(seed % 10_000, 4, rows)
    learn, held = values[:, : rows // 2], values[:, rows // 2:]
    dag = [(), (0,), (0, 1), (2,)]
    first = gaussian_held_out_fit(learn, held, fit_gaussian(learn, dag), dag)
    learn2 = learn[:, rng.permutation(learn.shape[1])]
    held2 = held[:, rng.permutation(held.shape[1])]
    assert gaussian_held_out_fit(learn2, held2, fit_gaussian(learn2, dag), dag) == first

    arities = np.array([3, 4, 2, 5])
    codes = np.vstack([rng.integers(0, r, size=rows) for r in arities]).astype(np.uint8)
    c_learn, c_held = codes[:, : rows // 2], codes[:, rows // 2:]
    names = ["a", "b", "c", "d"]
    for a in (1 / 3, 0.1, 1.0):
        first = held_out_fit(c_learn, c_held, arities, fit_discrete(c_learn, arities, dag), a,
                             names)
        l2 = c_learn[:, rng.permutation(c_learn.shape[1])]
        h2 = c_held[:, rng.permutation(c_held.shape[1])]
        assert held_out_fit(l2, h2, arities, fit_discrete(l2, arities, dag), a,
                            names) == first


# --------------------------------------------------------------------------- discrete tables


def test_probabilities_and_their_logarithms_are_single_scalar_operations() -> None:
    """theta_jk = (N_jk + a) / (N_j + r a) with the integer N_j (Heckerman, Geiger &
    Chickering 1995, eq. 9), computed here one entry at a time in Python, equals the
    table (==); its logarithms are our scalar ``ln_scalar`` (numpy's vectorised log and
    glibc's log differ by CPU in the last bit for a fraction of arguments), and within
    one unit in the last place of the C library's ``math.log``; each
    held-out row's log-likelihood is the column-order sum of them (==)."""
    rng = np.random.default_rng(8)
    arities = np.array([40, 40, 2])
    codes = np.vstack([rng.integers(0, r, size=45_000) for r in arities]).astype(np.uint8)
    codes[2] = (rng.random(45_000) < 0.2 + 0.6 * codes[0] / 40).astype(np.uint8)
    learn, held = codes[:, :40_000], codes[:, 40_000:]
    dag = [(), (), (0, 1)]
    for a in (1 / 3, 0.1):
        families = fit_discrete(learn, arities, dag)
        tables, logs = [], []
        for fam in families:
            expected = [[(int(n) + a) / (int(row.sum()) + fam.arity * a) for n in row]
                        for row in fam.counts]
            assert fam.probabilities(a).tolist() == expected
            assert fam.log_probabilities(a).tolist() == [[ln_scalar(p) for p in row]
                                                         for row in expected]
            assert all(abs(ln_scalar(p) - math.log(p)) <= math.ulp(math.log(p))
                       for row in expected for p in row)
            tables.append(expected)
            logs.append({tuple(int(s) for s in fam.parent_states[j]): j
                         for j in range(fam.configs.size)})
        rows, _ = log_likelihood_rows(families, held, a)
        last, _ = log_likelihood_rows(families[2:], held, a)  # one term per row
        for r in range(held.shape[1]):
            terms = []
            for v, fam in enumerate(families):
                j = logs[v][tuple(int(held[p, r]) for p in fam.parents)]
                terms.append(ln_scalar(tables[v][j][int(held[v, r])]))
            assert rows[r] == (terms[0] + terms[1]) + terms[2]
            assert last[r] == terms[2]


# --------------------------------------------------------------------------- LDL^T routines


def test_ldl_solve_and_logdet_of_hand_computed_examples() -> None:
    """By hand. A = [[4, 2], [2, 3]]: D = (4, 3 - 2 * 2 / 4 = 2), L_10 = 1/2, det 8,
    A^{-1} (2, 1) = (3 * 2 - 2 * 1, -2 * 2 + 4 * 1) / 8 = (1/2, 0).
    B = [[4, 2, 2], [2, 5, 3], [2, 3, 6]]: L_10 = L_20 = 1/2, D_1 = 5 - 1 = 4,
    L_21 = (3 - 1/2 * 1/2 * 4) / 4 = 1/2, D_2 = 6 - 1 - 1 = 4, det 64; B (1, -1, 2) =
    (6, 3, 11). Every intermediate value is exact in binary, so == holds."""
    a = [[4.0, 2.0], [2.0, 3.0]]
    assert ldl(a) == ([[], [0.5]], [4.0, 2.0])
    assert solve_spd(a, [2.0, 1.0]) == [0.5, 0.0]
    assert logdet_spd(a) == math.fsum([ln_scalar(4.0), ln_scalar(2.0)])
    assert logdet_spd(a) == pytest.approx(math.log(8.0), rel=1e-15)
    b = [[4.0, 2.0, 2.0], [2.0, 5.0, 3.0], [2.0, 3.0, 6.0]]
    assert ldl(b) == ([[], [0.5], [0.5, 0.5]], [4.0, 4.0, 4.0])
    assert solve_spd(b, [6.0, 3.0, 11.0]) == [1.0, -1.0, 2.0]
    assert logdet_spd(b) == pytest.approx(math.log(64.0), rel=1e-15)
    assert logdet_spd([]) == 0.0
    with pytest.raises(NotPositiveDefinite):
        ldl([[1.0, 2.0], [2.0, 1.0]])  # eigenvalues 3 and -1
    # the last pivot of a family matrix [parents, child] is the residual sum of squares
    assert ldl([[1.0, 1.0], [1.0, 1.0]], last_pivot_free=True)[1] == [1.0, 0.0]


@settings(max_examples=60, deadline=None)
@given(seed=st.integers(0, 2**32 - 1), size=st.integers(1, 10),
       scale=st.sampled_from([1e-3, 1.0, 1e4]))
def test_solve_and_logdet_agree_with_numpy_on_random_spd_matrices(
        seed: int, size: int, scale: float) -> None:
    """Accuracy against numpy.linalg (reference library, LAPACK's LU): random symmetric
    positive definite matrices B B^T + size I, within 1e-10 relative."""
    rng = np.random.default_rng(seed)
    b = rng.normal(size=(size, size + 3))
    matrix = (b @ b.T + size * np.eye(size)) * scale
    matrix = (matrix + matrix.T) / 2
    rhs = rng.normal(size=size) * scale
    ours = np.array(solve_spd(matrix.tolist(), rhs.tolist()))
    theirs = np.linalg.solve(matrix, rhs)
    assert np.linalg.norm(ours - theirs) <= 1e-10 * np.linalg.norm(theirs)
    sign, logdet = np.linalg.slogdet(matrix)
    assert sign == 1.0
    assert abs(logdet_spd(matrix.tolist()) - logdet) <= 1e-10 * max(abs(logdet), 1.0)


def test_rss_is_the_schur_complement_of_the_family_matrix() -> None:
    """RSS = S_yy - S_yZ S_ZZ^{-1} S_Zy (numpy.linalg.solve as the reference)."""
    values = network_data(5, 5, 400)
    stats = sufficient_statistics(values)
    s = stats.scatter
    for child, parents in [(4, (0, 1, 2)), (0, (3,)), (2, (0, 1, 3, 4))]:
        p = list(parents)
        expected = s[child, child] - s[p, child] @ np.linalg.solve(s[np.ix_(p, p)],
                                                                   s[p, child])
        assert relative_gap(residual_sum_of_squares(stats, child, parents), expected) < 1e-9


# --------------------------------------------------------------------------- the machine

_PROBE = """
import json, sys
import numpy as np
from runner.evaluation import gaussian_held_out_fit
from runner.fit import fit_gaussian
from runner.scores import build_gaussian_scorer
sys.path.insert(0, "tests")
from test_deterministic_gaussian import network_data
n = 6
values = network_data(12, n, 3000, offset=300.0)  # element-wise: the same data everywhere
out = {}
for name in ("gaussian-loglik", "gaussian-bic", "bge"):
    scorer = build_gaussian_scorer(name, values)
    out[name] = [repr(scorer.family(c, [p for p in range(c)])) for c in range(n)]
dag = [tuple(range(c)) for c in range(n)]
fams = fit_gaussian(values[:, :2000], dag)
out["fit"] = [repr(x) for f in fams for x in (f.intercept, *f.coefficients, f.variance)]
ev = gaussian_held_out_fit(values[:, :2000], values[:, 2000:], fams, dag)
out["held_out"] = {k: repr(v) for k, v in ev["log_likelihood"].items()}
print(json.dumps(out))
"""


@pytest.mark.slow
def test_values_do_not_depend_on_the_blas_kernel_or_its_threads() -> None:
    """The same scores, fitted parameters and held-out totals (every bit) under OpenBLAS's
    default kernel for this CPU, the oldest x86-64 one (OPENBLAS_CORETYPE=Prescott), and
    one or two threads; numpy's and scipy's OpenBLAS read these variables at load time,
    so each setting runs in its own interpreter."""
    outputs = {}
    for label, extra in [("default", {}),
                         ("prescott-1", {"OPENBLAS_CORETYPE": "Prescott",
                                         "OPENBLAS_NUM_THREADS": "1"}),
                         ("default-2", {"OPENBLAS_NUM_THREADS": "2"})]:
        env = {**os.environ, **extra, "PYTHONPATH": str(ROOT)}
        done = subprocess.run([sys.executable, "-c", _PROBE], env=env, cwd=ROOT,
                              capture_output=True, text=True, timeout=300)
        assert done.returncode == 0, done.stderr
        outputs[label] = json.loads(done.stdout)
    assert outputs["prescott-1"] == outputs["default"]
    assert outputs["default-2"] == outputs["default"]


# --------------------------------------------------------------------------- the routes

# numpy calls whose value depends on the CPU, the BLAS/LAPACK kernel or its threads
_MACHINE_DEPENDENT = {"linalg", "dot", "einsum", "matmul", "inner", "tensordot", "log",
                      "exp", "log1p", "expm1", "cov", "var", "std", "mean"}


@pytest.mark.parametrize("module", ["runner/scores/gaussian.py", "runner/fit.py",
                                    "runner/evaluation.py", "runner/scores/fixed_order.py"])
def test_stored_values_take_no_machine_dependent_route(module: str) -> None:
    """Static check of the modules whose floats reach run.json, model.json or a tie: no
    numpy linear algebra, vectorised logarithm or exponential, no ``@`` or ``einsum``
    product (except the one product of exact integer limbs in exact_moments, which cannot
    round) and no ``.mean()``/``.var()`` float reduction (``LinAlgError`` is only an
    exception class)."""
    import ast

    tree = ast.parse((ROOT / module).read_text(encoding="utf-8"))
    exception_class = {id(node.value) for node in ast.walk(tree)
                       if isinstance(node, ast.Attribute) and node.attr == "LinAlgError"}
    found = []
    for node in ast.walk(tree):
        if (isinstance(node, ast.Attribute) and node.attr in _MACHINE_DEPENDENT
                and id(node) not in exception_class
                and not (isinstance(node.value, ast.Name) and node.value.id == "math")):
            found.append(f"line {node.lineno}: .{node.attr}")
        if isinstance(node, ast.BinOp) and isinstance(node.op, ast.MatMult):
            found.append(f"line {node.lineno}: @")
    allowed = [f"line {n}: .einsum" for n in _exact_product_lines()] if (
        module.endswith("fixed_order.py")) else []
    assert sorted(set(found) - set(allowed)) == []


def _exact_product_lines() -> list[int]:
    text = (ROOT / "runner/scores/fixed_order.py").read_text(encoding="utf-8").splitlines()
    lines = [i + 1 for i, line in enumerate(text)
             if 'np.einsum("ri,rj->ij", by_row, by_row' in line]
    assert len(lines) == 1
    return lines
