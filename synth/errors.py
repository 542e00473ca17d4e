"""One exception tree and one warning tree for synth.

Every error raised for bad input is a :class:`SynthError`; each subclass also inherits the
matching builtin so that ``except ValueError`` keeps working for callers who do not know us.
Messages say what was received, what is allowed and how to fix it.
"""

__all__ = [
    "SynthError", "SnapshotError", "MolecularDataError", "UnknownSpeciesError",
    "ConfigError", "ExcitationError", "ConvergenceError", "InstrumentError",
    "OutputError", "MissingDependencyError", "MemoryBudgetError",
    "SynthWarning", "UnderResolvedVelocityWarning", "RateExtrapolationWarning",
    "BeamUndersampledWarning", "FieldLargerThanPrimaryBeamWarning", "TableAccuracyWarning",
]


class SynthError(Exception):
    """Base class of every error synth raises on purpose."""


class SnapshotError(SynthError, ValueError):
    """A snapshot field is missing, has the wrong shape or unit, or holds bad values."""


class MolecularDataError(SynthError, ValueError):
    """A molecular data file or product is malformed or inconsistent."""


class UnknownSpeciesError(SynthError, KeyError):
    """A species or transition name that synth does not know."""

    def __str__(self):  # KeyError would quote the message
        return str(self.args[0]) if self.args else ""


class ConfigError(SynthError, ValueError):
    """A configuration file or option is invalid."""


class ExcitationError(SynthError, ValueError):
    """Excitation cannot be computed for the given inputs."""


class ConvergenceError(SynthError, RuntimeError):
    """An iterative solver did not converge."""


class InstrumentError(SynthError, ValueError):
    """An instrument, array or observing parameter is invalid."""


class OutputError(SynthError, OSError):
    """An output cannot be written (exists, unwritable, ...)."""


class MissingDependencyError(SynthError, ImportError):
    """An optional dependency is needed for this feature but not installed."""


class MemoryBudgetError(SynthError, MemoryError):
    """The requested memory budget is too small for the work."""


class SynthWarning(UserWarning):
    """Base class of every warning synth emits."""


class UnderResolvedVelocityWarning(SynthWarning):
    """Velocity changes across cells by more than the local line width."""


class RateExtrapolationWarning(SynthWarning):
    """Collision rates were needed outside their tabulated temperature range."""


class BeamUndersampledWarning(SynthWarning):
    """A beam or feature is smaller than a pixel."""


class FieldLargerThanPrimaryBeamWarning(SynthWarning):
    """The sky model extends well beyond the primary beam."""


class TableAccuracyWarning(SynthWarning):
    """An interpolation table did not reach its requested accuracy."""


def refuse_renamed_fields(cls, renamed):
    """Wrap the dataclass ``cls``'s __init__ so that a renamed keyword is refused with its new
    name (one line), instead of Python's bare "unexpected keyword argument"."""
    init = cls.__init__

    def __init__(self, *args, **kwargs):
        for old in sorted(set(kwargs) & set(renamed)):
            raise InstrumentError(f"{cls.__name__}: {old}= was renamed to {renamed[old]}")
        init(self, *args, **kwargs)
    __init__.__doc__, __init__.__wrapped__ = init.__doc__, init
    cls.__init__ = __init__
    return cls
