"""Errors the registry raises for bad input and refused actions.

Every error a user can cause is a :class:`RegistryError`; its message names
where the problem is (file, line, field) so it can be fixed without a debugger.
"""

from __future__ import annotations


class RegistryError(Exception):
    """Base class for every error caused by input or by a refused action."""


class InputError(RegistryError, ValueError):
    """Bad input data, located as precisely as the source allows.

    A :class:`ValueError` too, so numerical code called with a bad argument fails the
    way scikit-learn and numpy callers expect.

    Parameters
    ----------
    message : str
        What is wrong, in words.
    file : str, optional
        File name (or other source label) the input came from.
    line : int, optional
        1-based line number in that file.
    field : str, optional
        Column, header or parameter name.
    """

    def __init__(self, message: str, *, file: str | None = None,
                 line: int | None = None, field: str | None = None):
        self.message = message
        self.file = file
        self.line = line
        self.field = field
        super().__init__(self.located())

    def located(self) -> str:
        where = []
        if self.file:
            where.append(str(self.file))
        if self.line is not None:
            where.append(f"line {self.line}")
        if self.field:
            where.append(f"field {self.field}")
        prefix = ":".join(where[:1]) + (" " + ", ".join(where[1:]) if len(where) > 1 else "")
        return f"{prefix}: {self.message}" if where else self.message


class FormatError(InputError):
    """A spectrum or results file that does not follow its format."""


def all_of(problems: list[InputError]) -> InputError:
    """One error standing for several problems found in one pass: the first, its message
    counting the others, with every one in ``errors`` so a caller can list them all."""
    first = problems[0]
    if len(problems) == 1:
        return first
    out = type(first)(f"{first.message} (and {len(problems) - 1} more problem(s))",
                      file=first.file, line=first.line, field=first.field)
    out.errors = list(problems)
    return out


def each_problem(exc: InputError) -> list[InputError]:
    """The problems an error stands for (see :func:`all_of`)."""
    return list(getattr(exc, "errors", None) or [exc])


class NotFoundError(RegistryError):
    """A named object (sample, model version, instrument, ...) does not exist."""


class PermissionDenied(RegistryError):
    """The acting user's roles do not allow the action."""


class AuthenticationError(RegistryError):
    """Unknown user, inactive user or wrong password."""


class StateError(RegistryError):
    """An action not allowed in the object's current lifecycle state."""


class IntegrityError(RegistryError):
    """Stored content no longer matches its recorded hash."""
