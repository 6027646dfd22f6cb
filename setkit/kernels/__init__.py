"""Pure array algorithms shared by families (no set objects here).

Compiled kernels are cached on disk by numba (``cache=True`` on every ``@njit`` of setkit except
the per-set closures of :mod:`setkit.kernels.bound`, whose data are compiled in): beside their
modules in ``__pycache__`` when that folder is writable, else in numba's user-wide cache folder, or
in ``NUMBA_CACHE_DIR`` when it is set. A process that finds its kernels in the cache loads them
(milliseconds each); the cache is keyed by numba on each source file's modification time and size,
the argument types, the Python and numba versions and the CPU, so an upgrade, an edited source file
or a new argument type (e.g. a read-only array) compiles again.

When a kernel of setkit is about to be compiled rather than loaded (the first use after an
installation or an upgrade: seconds per family, up to about a minute for all of them on a slow
machine), one line says so on stderr, once per process; ``SETKIT_QUIET_COMPILE=1`` silences it.
The notice listens to numba's compile events, which numba fires only on a cache miss.
"""
import os
import sys
import threading

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


_announced = threading.Event()


def _compiling(dispatcher) -> None:
    """Called by numba when it compiles (not loads) a function: one stderr line for setkit's kernels."""
    if _announced.is_set():
        return
    module = getattr(getattr(dispatcher, "py_func", None), "__module__", "") or ""
    if not module.startswith("setkit."):
        return
    _announced.set()
    if os.environ.get("SETKIT_QUIET_COMPILE"):
        return
    print(f"setkit: compiling native kernels ({module}) on first use; this takes seconds (up to about a "
          f"minute for every family), once: they are cached in {cache_folder()}. "
          f"Set SETKIT_QUIET_COMPILE=1 to silence.", file=sys.stderr, flush=True)


def _listen_for_compilation() -> None:
    from numba.core import event

    class CompileNotice(event.Listener):
        def on_start(self, ev):
            data = ev.data if isinstance(ev.data, dict) else {}
            _compiling(data.get("dispatcher"))

        def on_end(self, ev):
            pass

    event.register("numba:compile", CompileNotice())


_listen_for_compilation()
