"""Exception and warning classes.

Every error a user can cause derives from :class:`CubewrightError`; the command
line turns it into one line on stderr and exit code 2.  Each subclass also
derives from the matching builtin so ``except ValueError`` keeps working.
"""

__all__ = [
    "CubewrightError",
    "ConfigError",
    "SnapshotError",
    "FitsInputError",
    "OutputError",
    "MemoryBudgetError",
    "EmptyFieldError",
    "CubewrightWarning",
    "UndersampledBeamWarning",
    "ChannelTooWideWarning",
    "FieldTooSmallWarning",
    "ParticlesOutsideFieldWarning",
    "OversizedParticleWarning",
]


class CubewrightError(Exception):
    """Base of every error caused by bad input (exit code 2 on the command line)."""


class ConfigError(CubewrightError, ValueError):
    """A config file or override is malformed; the message starts with ``file:key.path:``."""


class SnapshotError(CubewrightError, ValueError):
    """A snapshot file is missing, unreadable, or holds bad values."""


class FitsInputError(CubewrightError, ValueError):
    """A FITS file given as input cannot be read or lacks what is needed."""


class OutputError(CubewrightError, OSError):
    """An output cannot be written (folder unwritable, file exists without overwrite)."""


class MemoryBudgetError(CubewrightError, MemoryError):
    """The planned work would not fit in the configured memory budget."""


class EmptyFieldError(CubewrightError, ValueError):
    """No particle falls inside the selection or the field of view."""


class CubewrightWarning(UserWarning):
    """Base of every cubewright warning."""


class UndersampledBeamWarning(CubewrightWarning):
    """Fewer than three pixels across the beam FWHM."""


class ChannelTooWideWarning(CubewrightWarning):
    """Channels are wider than the thermal line width of the gas."""


class FieldTooSmallWarning(CubewrightWarning):
    """The field of view is smaller than the selected gas."""


class ParticlesOutsideFieldWarning(CubewrightWarning):
    """Part of the selected gas falls outside the cube and is not recorded."""


class OversizedParticleWarning(CubewrightWarning):
    """Some particles' kernels are wider than the whole field of view."""
