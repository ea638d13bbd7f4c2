"""User-facing errors.

Every error a user can cause with bad input is an :class:`InputError` whose message says what is wrong
and where (file, line, atom, row).  The command line prints it as one line and exits non-zero; library
callers can catch it.  Anything else escaping is a bug in eigenfarm.
"""


class InputError(ValueError):
    """Bad input: the message names the file/line/atom/row and what is wrong with it."""


class ConvergenceError(RuntimeError):
    """An iterative procedure (minimiser, solver) did not reach its tolerance."""
