"""The one registry of optional dependencies.

Import optional packages only inside the function that needs them, through :func:`require`,
so that a missing package gives one clear message with the install hint.
"""

import importlib

from .errors import MissingDependencyError

__all__ = ["OPTIONAL", "require", "available"]

#: module name -> (pip extra that installs it, what it is used for); None: a core dependency
#: (``pip install synth`` installs it; the message still says how to get it back)
OPTIONAL = {
    "yt": ("yt", "reading simulation snapshots through yt"),
    "distributed": (None, "running on a dask.distributed cluster"),
    "reproject": (None, "regridding one cube onto another in `synth compare`"),
    "zarr": ("zarr", "reading snapshots stored as zarr"),
    "astrodendro": (None, "dendrograms in the statistics layer"),
}


def require(module):
    """Import and return an optional module, or raise MissingDependencyError with a hint."""
    try:
        return importlib.import_module(module)
    except ImportError as exc:
        extra, purpose = OPTIONAL.get(module, (None, "this feature"))
        hint = f'pip install "synth[{extra}]"' if extra else f"pip install {module}"
        raise MissingDependencyError(
            f"{module} is needed for {purpose} but is not installed; install it with: {hint}"
        ) from exc


def available(module):
    """True if an optional module can be imported."""
    try:
        importlib.import_module(module)
    except ImportError:
        return False
    return True
