"""The one exception family of saed.

Every message is a single line meant for a microscopist: it names the thing,
the value and, where there is one, the fix. Only :mod:`saed.cli` turns these
into exit status 2. A pattern that nothing fits is an answer, not an error: the
matcher returns a result saying so (and what came closest), and the CLI exits 0.
"""


class SaedError(Exception):
    """Base class; ``str(exc)`` is one line for a microscopist."""


class InputError(SaedError, ValueError):
    """Bad image, CIF, calibration file, argument or option mix."""


class PhaseError(InputError):
    """A phase that cannot be loaded: unknown name, broken CIF, impossible cell."""


class ImageError(InputError):
    """An image that cannot be used: unreadable, empty, NaN, saturated, wrong shape."""

