"""The one exception family of saxsnb.

Every error that saxsnb raises about a user's input derives from :class:`SaxsError`,
and names the file, line, frame or parameter it is about, so a scientist can find
the bad item in a folder of thousands of curves.
"""

from __future__ import annotations

__all__ = ["SaxsError", "InputError", "SaxsInputError", "SaxsFileError", "SaxsFitError", "SaxsWarning"]


class SaxsError(ValueError):
    """Base class of every saxsnb error (a ValueError: the input was not usable).

    ``except saxsnb.SaxsError`` catches every error saxsnb raises about a file, a
    parameter or a frame. (:data:`InputError` is another name for this class.)
    """


#: An alias of :class:`SaxsError` (the same class, not a subclass), kept for code written
#: against the first release.
InputError = SaxsError


class SaxsInputError(SaxsError):
    """An argument or a Dataset is not what saxsnb can work on.

    Parameters
    ----------
    message
        What is wrong, in plain words.
    parameter, frame
        Optional: the parameter name and frame index concerned; they are appended
        to the message and kept as attributes.
    """

    def __init__(self, message: str, *, parameter: str | None = None, frame=None):
        where = []
        if parameter is not None:
            where.append(f"parameter {parameter!r}")
        if frame is not None:
            where.append(f"frame {frame}")
        full = message + (f" [{', '.join(where)}]" if where else "")
        super().__init__(full)
        self.parameter = parameter
        self.frame = frame


class SaxsFileError(SaxsError):
    """A file cannot be read or written; the message names the file (and line)."""

    def __init__(self, message: str, *, path=None, line: int | None = None):
        where = ""
        if path is not None:
            where = f"{path}"
            if line is not None:
                where += f", line {line}"
            where += ": "
        super().__init__(where + message)
        self.path = None if path is None else str(path)
        self.line = line


class SaxsFitError(SaxsError):
    """A fit failed for a frame when ``errors="raise"`` was asked for."""

    def __init__(self, message: str, *, frame=None, parameter: str | None = None):
        where = []
        if frame is not None:
            where.append(f"frame {frame}")
        if parameter is not None:
            where.append(f"parameter {parameter!r}")
        super().__init__(message + (f" [{', '.join(where)}]" if where else ""))
        self.frame = frame
        self.parameter = parameter


class SaxsWarning(UserWarning):
    """A result that may mislead: shown to the user, never silently dropped."""
