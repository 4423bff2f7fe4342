"""How the kernels are loaded (geoops.kernel_loader): the ahead-of-time extension when it was
built from the sources present, numba's just-in-time compiler otherwise, the same numbers
either way."""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from geoops import kernel_loader

ROOT = Path(__file__).resolve().parents[1]

# a few kernels on fixed inputs, printed as JSON: run once per way of loading them
PROBE = r"""
import json, sys
import numpy as np
from geoops import kernel_loader, kernels, kernels_clean
from geoops.curves import NearestOnPolyline

rng = np.random.default_rng(4)
t = np.cumsum(rng.uniform(0.3, 0.9, 300))
xy = np.ascontiguousarray(np.column_stack([t, 4 * np.sin(t / 7)]) + rng.normal(0, 0.03, (300, 2)))
z = np.random.default_rng(9).standard_normal((400, 2))
status, sm, s, tangents, has_data, numbers = kernels_clean.clean_track(
    xy, np.zeros(300, dtype=np.bool_), float("nan"), z)
line = NearestOnPolyline(sm)
u = np.ascontiguousarray(tangents[::10])
n = np.ascontiguousarray(np.column_stack([-u[:, 1], u[:, 0]]))
base = np.ascontiguousarray(sm[::10])
sums = kernels.misfit_sums(base, u, n, 0.0, np.array([0.8, 1.5, 3.0]), kernels.NEWTON,
    line.poly, line.geo, line.grid, np.ones(len(sm), dtype=np.bool_), float(s[1] - s[0]),
    0.5, 1.0, 0.5)
fit = kernels.newton_fit(base, u, n, 0.0, 1.2, 0.5, 3.0, True, line.poly, line.geo,
    line.grid, np.ones(len(sm), dtype=np.bool_), float(s[1] - s[0]), 0.5, 1.0, 0.5, 1e-4, 8)
cache = getattr(getattr(kernels.closest, "_cache", None), "_cache_path", None)
json.dump({"mode": kernel_loader.MODE, "numba": "numba" in sys.modules, "cache": cache,
           "sm": sm.tolist(), "numbers": list(numbers), "sums": sums.tolist(),
           "fit": list(fit), "turn": kernels_clean.least_turn_cosine(xy, 0.6),
           "tidy": kernels_clean.tidy_part(xy, 1e-9, 2).tolist()}, sys.stdout)
"""


def _probe(mode: str | None) -> dict[str, object]:
    env = {k: v for k, v in os.environ.items() if k != "RUTWISE_KERNELS"}
    if mode is not None:
        env["RUTWISE_KERNELS"] = mode
    out = subprocess.run(
        [sys.executable, "-c", PROBE], cwd=ROOT, env=env, capture_output=True, text=True,
        timeout=600, check=True,
    )
    return dict(json.loads(out.stdout))


def _built() -> bool:
    return kernel_loader.STAMP.exists()


@pytest.mark.skipif(shutil.which("cc") is None, reason="no C compiler: no ahead-of-time build")
def test_setup_builds_the_kernels_ahead_of_time_and_numba_is_not_imported() -> None:
    assert _built(), "run make (python -m geoops.kernel_build) to build the kernels"
    assert kernel_loader.MODE == "aot"
    got = _probe(None)
    assert got["mode"] == "aot"
    assert got["numba"] is False


@pytest.mark.slow
@pytest.mark.skipif(not _built(), reason="the kernels were not built ahead of time")
def test_ahead_of_time_and_just_in_time_kernels_give_the_same_numbers() -> None:
    aot, jit = _probe(None), _probe("jit")
    assert (aot["mode"], jit["mode"]) == ("aot", "jit")
    assert jit["numba"] is True
    # numba's cache of these sources lives apart from that of any other version of them
    assert f"kernels-{kernel_loader.source_digest()[:16]}" in str(jit["cache"])
    for key in ("sm", "numbers", "sums", "fit", "turn", "tidy"):
        np.testing.assert_allclose(
            np.asarray(aot[key], dtype=float), np.asarray(jit[key], dtype=float),
            rtol=1e-12, atol=1e-12, err_msg=key,
        )


def test_a_stale_or_missing_stamp_falls_back_to_just_in_time(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.delenv("RUTWISE_KERNELS", raising=False)
    stamp = tmp_path / "stamp"
    assert kernel_loader._choose(stamp) == ("jit", None)  # never built
    stamp.write_text("0" * 64 + "\n")  # built from other sources
    assert kernel_loader._choose(stamp) == ("jit", None)
    stamp.write_text(kernel_loader.source_digest() + "\n")
    mode, module = kernel_loader._choose(stamp)
    assert mode == ("aot" if _built() else "jit")
    assert (module is not None) == _built()
    monkeypatch.setenv("RUTWISE_KERNELS", "jit")
    assert kernel_loader._choose(stamp) == ("jit", None)


def test_the_digest_covers_every_kernel_source() -> None:
    # a kernel edited after the build must not run from the old extension
    names = {p.name for p in (ROOT / "geoops").glob("kernel*.py")} - {"kernel_build.py"}
    assert names == set(kernel_loader.SOURCES)


@pytest.mark.skipif(shutil.which("cc") is None, reason="no C compiler: no ahead-of-time build")
def test_an_analysis_loads_neither_numba_nor_scipy(tmp_path: Path) -> None:
    # start-up is a large share of a small job: numba (0.6 s), scipy.spatial (0.2 s), scipy's
    # LAPACK (0.1 s), networkx (0.2 s) and the pandas and geopandas that pyogrio would load
    # for its dataframe functions (0.25 s) must stay out of an ordinary analysis
    script = (
        "import sys\nfrom geoops import cli\n"
        "try:\n    cli.main(sys.argv[1:])\nexcept SystemExit:\n    pass\n"
        "print(sorted({m.split('.')[0] for m in sys.modules} & "
        "{'numba', 'scipy', 'networkx', 'rasterio', 'skimage', 'pandas', 'geopandas'}))"
    )
    out = subprocess.run(
        [sys.executable, "-c", script, "analyze", "sample_layers/harrowmere_analyst.gpkg",
         "--layer", "ruts_digitised", "--id-field", "rut_ref", "-q",
         "-o", str(tmp_path / "out.gpkg")],
        cwd=ROOT, capture_output=True, text=True, timeout=300, check=True,
    )
    assert (tmp_path / "out.gpkg").exists()
    assert out.stdout.strip().splitlines()[-1] == "[]"
