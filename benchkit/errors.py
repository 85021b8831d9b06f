"""The one exception type benchkit raises for bad input or a failed check.

The CLI turns it into a one-line message and a non-zero exit; anything else
that escapes is a bug and is reported as such.
"""

from __future__ import annotations


class BenchkitError(ValueError):
    """Bad input, an unusable capture, or a failed safety check.

    The message is a complete sentence for the user, without a traceback.
    """


class NoToneError(BenchkitError):
    """No tone stands out of the capture where one was looked for (a silent
    stage, an open wire): a probe may take that as "nothing came back"."""
