"""Build the kernels ahead of time: ``python -m geoops.kernel_build``.

Compiles every kernel declared in :mod:`geoops.kernels` and :mod:`geoops.kernels_clean` with
numba's pycc into the extension module ``geoops/_kernels_aot`` and writes its stamp (see
:mod:`geoops.kernel_loader`). Needs a C compiler and the Python headers; without them it
says so and leaves the kernels to numba's just-in-time compiler (exit status 0: rutwise works
either way, only its start-up is slower). Takes about a minute.
"""

from __future__ import annotations

import os
import subprocess
import sys
import tempfile
import time
import warnings
from pathlib import Path


def _build(out_dir: Path) -> Path:
    from . import kernel_loader, kernels, kernels_clean  # noqa: F401 - they fill the registry

    assert kernel_loader.MODE == "build"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # pycc's pending-deprecation notice
        import numba.pycc.compiler as pycc_compiler
        from numba.pycc import CC

    class _ReleaseGil(pycc_compiler.Flags):
        # pycc's Python wrappers keep the GIL by default; the kernels are written to run in
        # threads side by side (geoops.parallel.thread_slices), as numba's nogil=True does
        def __init__(self, *args: object, **kwargs: object) -> None:
            super().__init__(*args, **kwargs)
            self.release_gil = True  # type: ignore[assignment]

    pycc_compiler.Flags = _ReleaseGil  # type: ignore[misc]
    names = [fn.__name__ for fn, _ in kernel_loader.REGISTRY]
    if len(set(names)) != len(names):
        raise SystemExit(f"kernel names must be unique across modules: {sorted(names)}")
    cc = CC(kernel_loader.AOT_MODULE)
    cc.output_dir = str(out_dir)
    cc.verbose = False
    for fn, signature in kernel_loader.REGISTRY:
        cc.export(fn.__name__, signature)(fn)
    cc.compile()
    (built,) = out_dir.glob(f"{kernel_loader.AOT_MODULE}*")
    return built


def main() -> int:
    from . import kernel_loader

    if os.environ.get("RUTWISE_KERNELS") != "build":
        # the kernels' modules must be imported in build mode: a fresh interpreter
        env = dict(os.environ, RUTWISE_KERNELS="build")
        return subprocess.call([sys.executable, "-m", "geoops.kernel_build"], env=env)
    here = kernel_loader.HERE
    start = time.perf_counter()
    digest = kernel_loader.source_digest()  # of the sources as the build reads them
    try:
        with tempfile.TemporaryDirectory(dir=here) as tmp:
            built = _build(Path(tmp))
            kernel_loader.STAMP.unlink(missing_ok=True)
            for old in here.glob(f"{kernel_loader.AOT_MODULE}*"):
                if old.suffix in (".so", ".pyd"):
                    old.unlink()
            os.replace(built, here / built.name)
    except Exception as exc:  # noqa: BLE001 - any failure leaves the just-in-time way
        print(
            f"rutwise: the kernels could not be built ahead of time ({type(exc).__name__}: "
            f"{exc}); numba will compile them at first import instead (needs no C compiler, "
            "but start-up is slower).",
            file=sys.stderr,
        )
        return 0
    # the stamp last: a build interrupted before this point is never used
    kernel_loader.STAMP.write_text(digest + "\n")
    seconds = time.perf_counter() - start
    print(f"rutwise: kernels built ahead of time in {seconds:.0f} s: {here / built.name}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
