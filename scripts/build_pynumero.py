"""Build PyNumero's ASL library from the sources inside the installed Pyomo.

The library goes to ``$PYOMO_CONFIG_DIR/lib`` (``~/.pyomo/lib`` by default),
where Pyomo looks for it. Nothing is built when a loadable copy is there.
"""

from __future__ import annotations

import os
import pathlib
import shutil
import subprocess
import sys
import tempfile

ASL_INCLUDE = "/usr/include/ampl-netlib-solvers"
ASL_LIBRARY = "/usr/lib/x86_64-linux-gnu/libamplsolver.so"


def main() -> int:
    from pyomo.common.envvar import PYOMO_CONFIG_DIR
    from pyomo.contrib.pynumero.asl import AmplInterface

    if AmplInterface.available():
        print("build_pynumero: PyNumero ASL library already available")
        return 0
    import pyomo.contrib.pynumero as pynumero

    src = pathlib.Path(pynumero.__file__).parent / "src"
    if not (src / "CMakeLists.txt").exists():
        raise SystemExit(f"build_pynumero: no CMakeLists.txt in {src}")
    libdir = pathlib.Path(PYOMO_CONFIG_DIR) / "lib"
    libdir.mkdir(parents=True, exist_ok=True)
    with tempfile.TemporaryDirectory() as build:
        subprocess.run(
            ["cmake", str(src), f"-DASL_INCLUDE_DIR={ASL_INCLUDE}",
             f"-DASL_LIBRARY={ASL_LIBRARY}"],
            cwd=build, check=True, stdout=subprocess.DEVNULL)
        subprocess.run(["make", f"-j{os.cpu_count() or 1}"], cwd=build,
                       check=True, stdout=subprocess.DEVNULL)
        built = list(pathlib.Path(build).rglob("libpynumero_ASL*.so*"))
        if not built:
            raise SystemExit("build_pynumero: the build produced no libpynumero_ASL")
        for lib in built:
            tmp = libdir / (lib.name + ".tmp")
            shutil.copy2(lib, tmp)
            os.replace(tmp, libdir / lib.name)
    print(f"build_pynumero: installed PyNumero ASL library into {libdir}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
