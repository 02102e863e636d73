"""The environment a run was computed in: library versions, the platform, and the
numeric environment (CPU, numpy's SIMD features, BLAS kernel and threads, the variables
that choose them), and how two records' environments differ.

Informational only: none of it enters the input hash or what makes two runs the same.
It says why two runs of the same inputs might differ.
"""

from __future__ import annotations

import hashlib
import importlib
import os
import platform
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np


def environment() -> dict[str, Any]:
    """The record's ``environment``: library versions, the platform, and the numeric
    environment (:func:`numeric_environment`). Informational: none of it enters the input
    hash or the identity of two runs."""
    import networkx  # here, not at import: comparing records and the command stay light
    import pandas
    import pydantic

    return {
        "python": platform.python_version(),
        "numpy": np.__version__,
        "pandas": pandas.__version__,
        "pydantic": pydantic.__version__,
        "networkx": networkx.__version__,
        "platform": platform.platform(),
        "numeric": numeric_environment(),
    }


#: Environment variables that choose thread counts or compute kernels of numpy and the
#: BLAS libraries it may load (OpenBLAS, MKL, BLIS, Accelerate); null when unset.
NUMERIC_VARIABLES = (
    "OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "GOTO_NUM_THREADS", "MKL_NUM_THREADS",
    "BLIS_NUM_THREADS", "VECLIB_MAXIMUM_THREADS", "OPENBLAS_CORETYPE", "OPENBLAS_L2_SIZE",
    "MKL_CBWR", "MKL_ENABLE_INSTRUCTIONS", "MKL_DEBUG_CPU_TYPE", "NPY_DISABLE_CPU_FEATURES",
    "NPY_ENABLE_CPU_FEATURES",
)

#: The variables as they were when this module was imported: numpy and its BLAS were
#: loaded by then and read them then; a later change (Dask's nanny sets the thread
#: counts in its parent while it starts workers) has no effect here and is not recorded.
VARIABLES_AT_LOAD: dict[str, str | None] = {n: os.environ.get(n) for n in NUMERIC_VARIABLES}


def numeric_environment(environ: Mapping[str, str] | None = None) -> dict[str, Any]:
    """Where this process does its arithmetic: the CPU (model and flags), numpy's SIMD
    features (found on this CPU, compiled in as the baseline, dispatched at run time), the
    BLAS and OpenMP libraries loaded with their version, kernel and thread count
    (threadpoolctl), and the variables in :data:`NUMERIC_VARIABLES` (from ``environ``,
    by default :data:`VARIABLES_AT_LOAD`).

    Set-like entries are sorted, space-separated strings, so the stored record stays
    short. The block says why two runs of the same inputs might differ; it is never part
    of what makes them the same."""
    env = VARIABLES_AT_LOAD if environ is None else environ
    return {"cpu": _cpu(), "numpy_simd": _numpy_simd(), "blas": _blas(),
            "variables": {name: env.get(name) for name in NUMERIC_VARIABLES}}


def _cpu() -> dict[str, Any]:
    """Model, identity and flags of the first CPU in /proc/cpuinfo (x86 ``flags``, ARM
    ``Features``); without that file, what ``platform`` knows and no flags."""
    fields: dict[str, str] = {}
    try:
        text = Path("/proc/cpuinfo").read_text(encoding="utf-8", errors="replace")
    except OSError:
        text = ""
    for line in text.splitlines():
        if not line.strip():
            if fields:
                break  # the first processor's block is enough
            continue
        key, _, value = line.partition(":")
        fields.setdefault(key.strip().lower(), value.strip())
    flags_text = fields.get("flags", fields.get("features"))
    flags = " ".join(sorted(set(flags_text.split()))) if flags_text is not None else None
    if fields.get("vendor_id"):
        signature: str | None = (f"{fields['vendor_id']} family {fields.get('cpu family', '?')}"
                                 f" model {fields.get('model', '?')} stepping "
                                 f"{fields.get('stepping', '?')}")
    elif fields.get("cpu implementer"):
        signature = (f"implementer {fields['cpu implementer']} part "
                     f"{fields.get('cpu part', '?')} variant {fields.get('cpu variant', '?')}")
    else:
        signature = None
    model = (fields.get("model name") or fields.get("hardware") or platform.processor()
             or platform.machine() or None)
    return {"source": "/proc/cpuinfo" if fields else "platform",
            "machine": platform.machine() or None, "model": model, "signature": signature,
            "flags": flags,
            "flags_sha256": None if flags is None else hashlib.sha256(flags.encode()).hexdigest()}


def _numpy_simd() -> dict[str, str | None]:
    """numpy's CPU features: those found on this CPU, the compiled-in baseline and the
    features it dispatches to at run time; None where this numpy does not tell."""
    module: Any = None
    for name in ("numpy._core._multiarray_umath", "numpy.core._multiarray_umath"):
        try:
            module = importlib.import_module(name)
            break
        except ImportError:
            continue
    features = getattr(module, "__cpu_features__", None)

    def words(value: Any) -> str | None:
        return " ".join(sorted(str(v) for v in value)) if isinstance(value, list | tuple) else None

    return {"found": words([k for k, v in features.items() if v])
            if isinstance(features, dict) else None,
            "baseline": words(getattr(module, "__cpu_baseline__", None)),
            "dispatch": words(getattr(module, "__cpu_dispatch__", None))}


BLAS_FIELDS = ("user_api", "internal_api", "prefix", "version", "architecture",
               "threading_layer", "num_threads")


def numpy_uses(filepath: str | None, site: Path) -> bool:
    """Whether a loaded library at ``filepath`` is one numpy may use: bundled with numpy
    (``numpy/``, ``numpy.libs/`` under ``site``, numpy's install folder's parent) or from
    outside the installed packages (a system BLAS); not one another package brought, such
    as SciPy's BLAS, which numba loads at its first compiled count and which computes no
    stored value (so the list does not depend on which code ran first)."""
    if not filepath:
        return True
    try:
        inside = Path(filepath).resolve().relative_to(site)
    except ValueError:
        return True
    return inside.parts[0].split(".")[0] == "numpy"


def _blas() -> list[dict[str, Any]] | str:
    """The BLAS and OpenMP libraries numpy may use, as loaded in this process
    (threadpoolctl; :func:`numpy_uses`), sorted; a short reason instead when they cannot
    be listed."""
    try:
        from threadpoolctl import threadpool_info
    except ImportError:
        return "threadpoolctl is not installed"
    try:
        found = threadpool_info()
    except Exception as exc:  # a library that cannot be inspected must not stop a run
        return f"threadpoolctl failed: {type(exc).__name__}: {exc}"
    site = Path(np.__file__).resolve().parent.parent
    libraries = [{k: lib.get(k) for k in BLAS_FIELDS} for lib in found
                 if numpy_uses(lib.get("filepath"), site)]
    return sorted(libraries, key=lambda lib: tuple(str(lib[k]) for k in BLAS_FIELDS))


#: Labels of the numeric environment's entries in messages, by (section, key).
_NUMERIC_LABELS = {
    ("cpu", "machine"): "machine", ("cpu", "model"): "CPU model",
    ("cpu", "signature"): "CPU", ("cpu", "flags"): "CPU flags",
    ("numpy_simd", "found"): "numpy SIMD features", ("numpy_simd", "baseline"):
    "numpy SIMD baseline", ("numpy_simd", "dispatch"): "numpy SIMD dispatch",
}
_BLAS_LABELS = {"version": "version", "architecture": "kernel", "num_threads": "threads",
                "threading_layer": "threading layer"}
#: Entries held as sorted, space-separated words: their change lists the words.
_WORD_SETS = {("cpu", "flags"), ("numpy_simd", "found"), ("numpy_simd", "baseline"),
              ("numpy_simd", "dispatch")}
_SHOWN_WORDS = 8


def _shown(value: Any) -> str:
    return "unset" if value is None else str(value)


def _change(entry: str, a: Any, b: Any, words: bool = False) -> dict[str, Any]:
    if words and isinstance(a, str) and isinstance(b, str):
        wa, wb = set(a.split()), set(b.split())
        parts = [f"+{w}" for w in sorted(wb - wa)] + [f"-{w}" for w in sorted(wa - wb)]
        more = len(parts) - _SHOWN_WORDS
        text = " ".join(parts[:_SHOWN_WORDS]) + (f" (and {more} more)" if more > 0 else "")
        return {"entry": entry, "a": a, "b": b, "text": f"{entry} {text}"}
    return {"entry": entry, "a": a, "b": b, "text": f"{entry} {_shown(a)} -> {_shown(b)}"}


def _blas_name(lib: Mapping[str, Any], clash: bool) -> str:
    api = {"blas": "BLAS", "openmp": "OpenMP"}.get(str(lib.get("user_api")),
                                                   str(lib.get("user_api")))
    return f"{api} ({lib.get('prefix')})" if clash else api


def _blas_changes(a: Any, b: Any) -> list[dict[str, Any]]:
    if not isinstance(a, list) or not isinstance(b, list):
        return [] if a == b else [_change("BLAS libraries", a, b)]

    def key(lib: Mapping[str, Any]) -> tuple[str, str, str]:
        return (str(lib.get("user_api")), str(lib.get("internal_api")), str(lib.get("prefix")))

    la, lb = {key(x): x for x in a}, {key(x): x for x in b}
    apis = [k[0] for k in set(la) | set(lb)]
    out = []
    for k in sorted(set(la) | set(lb)):
        x, y = la.get(k), lb.get(k)
        name = _blas_name(x or y or {}, apis.count(k[0]) > 1)
        if x is None or y is None:
            lib = x or y or {}
            what = f"{lib.get('internal_api')} {lib.get('version')}"
            out.append({"entry": f"{name} library", "a": None if x is None else what,
                        "b": None if y is None else what,
                        "text": f"{name} library {'added' if x is None else 'gone'}: {what}"})
            continue
        for field_, label in _BLAS_LABELS.items():
            if x.get(field_) != y.get(field_):
                out.append(_change(f"{name} {label}", x.get(field_), y.get(field_)))
    return out


def numeric_changes(a: Mapping[str, Any], b: Mapping[str, Any]) -> list[dict[str, Any]]:
    """The entries of two numeric-environment blocks that differ (A -> B), one dict each:
    ``{entry, a, b, text}``."""
    out: list[dict[str, Any]] = []
    for section in ("cpu", "numpy_simd"):
        sa, sb = a.get(section) or {}, b.get(section) or {}
        for key in sorted(set(sa) | set(sb)):
            if key in ("flags_sha256", "source") or sa.get(key) == sb.get(key):
                continue
            label = _NUMERIC_LABELS.get((section, key), f"{section}.{key}")
            out.append(_change(label, sa.get(key), sb.get(key), (section, key) in _WORD_SETS))
    out += _blas_changes(a.get("blas"), b.get("blas"))
    va, vb = a.get("variables") or {}, b.get("variables") or {}
    out += [_change(name, va.get(name), vb.get(name)) for name in sorted(set(va) | set(vb))
            if va.get(name) != vb.get(name)]
    return out


def environment_changes(a: Mapping[str, Any], b: Mapping[str, Any]) -> dict[str, Any]:
    """How the environments of two records differ (A -> B): library versions and the
    platform, and the numeric environment (CPU, numpy's SIMD features, BLAS kernel and
    threads, the variables that choose them).

    ``recorded`` says which record has a numeric block (records from before it have
    none); ``same`` is True or False when both have one, else None (unknown)."""
    ea, eb = a.get("environment") or {}, b.get("environment") or {}
    na, nb = ea.get("numeric"), eb.get("numeric")
    changes = [_change(key, ea[key], eb[key]) for key in sorted(set(ea) & set(eb))
               if key != "numeric" and ea[key] != eb[key]]
    both = False
    if isinstance(na, Mapping) and isinstance(nb, Mapping):
        both = True
        changes += numeric_changes(na, nb)
    return {"recorded": {"a": isinstance(na, Mapping), "b": isinstance(nb, Mapping)},
            "same": (not changes) if both else None, "changes": changes}


def environment_sentence(env: Mapping[str, Any], results_differ: bool = False,
                         names: tuple[str, str] = ("A", "B")) -> str:
    """One sentence on :func:`environment_changes`: what differs, that nothing does (and
    so, when ``results_differ``, that the environment does not explain the difference),
    or which run (by ``names``) did not record it."""
    texts = "; ".join(c["text"] for c in env["changes"])
    if env["same"] is None:
        missing = [name for side, name in zip("ab", names, strict=True)
                   if not env["recorded"][side]]
        text = ("numeric environment not recorded in run " + " and ".join(missing)
                + " (a record from before it was kept)")
        return text + (f"; other differences: {texts}" if texts else "")
    if env["changes"]:
        return f"numeric environment differs: {texts}"
    return "numeric environment is the same in both runs" + (
        ": the difference is not explained by the environment" if results_differ else "")
