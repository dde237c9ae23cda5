"""Every compiled kernel calls only compiled functions of its own file.

numba's on-disk cache (``cache=True``) is keyed to the source file of the function it
compiled: an edit to a helper defined in another module does not invalidate it, and the
old machine code keeps running (numba's caching notes, "cache invalidation"; a known
limit of the library, not of this project). The observer's numbers must follow its
source, so the rule is checked here for every module of the three packages that uses
numba. An observer kernel split across files would pass its tests on a fresh machine and
run stale code on a developer's.
"""

from __future__ import annotations

import importlib
import pkgutil
from types import ModuleType

import numba
import pytest
from numba.core.registry import CPUDispatcher

import daq
import estimator
import ui

_PACKAGES = (daq, estimator, ui)


def _numba_modules() -> list[ModuleType]:
    """The modules of the three packages that import numba (by their source text, so
    that the Qt modules are not imported for nothing)."""
    found = []
    for package in _PACKAGES:
        for info in pkgutil.walk_packages(package.__path__, package.__name__ + "."):
            spec = importlib.util.find_spec(info.name)
            if spec is None or not spec.origin or not spec.origin.endswith(".py"):
                continue
            with open(spec.origin, encoding="utf-8") as f:
                if "numba" not in f.read():
                    continue
            found.append(importlib.import_module(info.name))
    return found


MODULES = _numba_modules()


def test_the_kernels_are_found() -> None:
    names = {m.__name__ for m in MODULES}
    # the observer's and the smoother's kernels, and the CSV writer's pass
    assert {"estimator.mm_kernel", "estimator.mm_smooth_kernel", "daq.csv_rows_kernel"} <= names


@pytest.mark.parametrize("module", MODULES, ids=lambda m: m.__name__)
def test_a_kernel_calls_compiled_functions_of_its_own_file_only(module: ModuleType) -> None:
    kernels = [
        f
        for f in vars(module).values()
        if isinstance(f, CPUDispatcher) and f.py_func.__module__ == module.__name__
    ]
    for kernel in kernels:
        for name in kernel.py_func.__code__.co_names:
            used = vars(module).get(name)
            if isinstance(used, CPUDispatcher):
                assert used.py_func.__module__ == module.__name__, (
                    f"{module.__name__}.{kernel.py_func.__name__} calls {name} from "
                    f"{used.py_func.__module__}: numba's cache would not see edits to it"
                )


def test_the_check_sees_a_kernel_that_calls_another_files_function() -> None:
    """The check itself: a kernel calling a compiled function of another module fails it."""
    from estimator import mm_smooth_kernel

    helper = next(
        f
        for f in vars(mm_smooth_kernel).values()
        if isinstance(f, CPUDispatcher) and f.py_func.__module__ == mm_smooth_kernel.__name__
    )
    module = ModuleType("tests.estimator.fake_kernel")
    module.helper = helper
    exec("def kernel(x):\n    return helper(x)\n", vars(module))  # its globals: the module
    module.kernel = numba.njit(module.kernel)
    with pytest.raises(AssertionError, match="numba's cache would not see"):
        test_a_kernel_calls_compiled_functions_of_its_own_file_only(module)
