"""Pure array algorithms shared by families (no set objects here).

Compiled kernels are cached on disk by numba (``cache=True``): beside these modules in
``__pycache__`` when that folder is writable, else in numba's user-wide cache folder, or in
``NUMBA_CACHE_DIR`` when it is set. The first import of this package in a process checks for
that cache; when it is missing (first use after installation, or after an upgrade) it says once
on stderr that compiling will take a few seconds.
"""
import glob
import os
import sys

_HERE = os.path.dirname(os.path.abspath(__file__))


def cache_folder() -> str:
    """Where numba stores the compiled kernels of this package (see the module docstring)."""
    env = os.environ.get("NUMBA_CACHE_DIR")
    if env:
        return env
    local = os.path.join(_HERE, "__pycache__")
    if os.access(_HERE, os.W_OK) and (os.access(local, os.W_OK) or not os.path.exists(local)):
        return local
    return os.path.join(os.path.expanduser("~"), ".cache", "numba")


def _announce_compilation():
    """One line on stderr when no compiled kernel of this package is cached yet (compiling takes > 1 s)."""
    if os.environ.get("SETKIT_QUIET_COMPILE"):
        return
    folder = cache_folder()
    if glob.glob(os.path.join(folder, "**", "simplex.*.nbi"), recursive=True):
        return
    print(f"setkit: compiling native kernels on first use (a few seconds, once; cached in {folder}). "
          f"Set SETKIT_QUIET_COMPILE=1 to silence.", file=sys.stderr)


_announce_compilation()
