"""The one exception type benchkit raises for bad input or a failed check,
and the warnings it gives (each with a code).

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


#: Every warning's code and what it means (docs/results-json.md lists them):
#: a program keys on the code, a person reads the text.
WARNING_CODES = {
    "input-clipped": "the input clipped: the figures it touched are not valid",
    "dropout": "a stream fault, a gap or a click touched the capture: what it touched is left out or not valid",
    "interrupted": "the run was stopped or cut off: what it completed is reported",
    "below-noise": "a figure lies in the noise: it is an upper bound, not a reading",
    "below-resolution": "a difference lies under what the measurement resolves",
    "outside-band": "a component or a band edge lies outside what the band or the sample rate allows",
    "crowded": "components lie too close together to be read apart",
    "hum": "mains hum or ripple stands out of the capture",
    "bursts": "the capture holds clicks or bursts, not steady noise",
    "no-reference": "no reference input: what only a reference can tell is left out",
    "no-scale": "an input has no voltage scale: figures are in FS",
    "clock-offset": "the recorder's clock runs against the player's",
    "latency-moves": "the round trip changed between starts of the stream",
    "sweep-start": "close to the sweep's start the figures may not be read",
    "interface-limited": "the interface, not the stage, limits the figure",
    "profile-range": "the calibration profile does not cover the whole range: it is held at its edge",
    "drive-changed": "the drive was not the same between readings that must share it",
    "assumed": "a value was not known and was assumed",
    "short-of-limit": "the steps ended short of the distortion limit",
    "reordered": "the input was not in order and was sorted",
    "same-time": "readings share a time stamp",
    "skipped": "unreadable values were skipped",
    "fit": "a fit could not be made, or covers only part of the data",
    "not-like-for-like": "the runs compared differ in their conditions",
    "safety": "the wiring or the settings put the stage, the load or the interface at risk",
    "near-floor": "a level lands close to the interface's floor",
    "near-interface-floor": "figures lie within 6 dB of the interface's own floor: they may be the interface's",
    "no-load": "no load was given: a power stage belongs on a dummy load of the right rating",
    "gain-over-given": "the stage's gain measured over the gain given: the pre-flight took the measured one",
    "ignored": "a file, or a part of one, could not be read and was ignored",
    "not-valid": "a step or a reading is not valid (see its own warnings)",
    "unclassified": "a warning stored before warnings had codes (result schema 1)",
}


class BenchWarning(str):
    """A warning: its text (a ``str``, printed and searched as any text) and
    its ``code``, one of :data:`WARNING_CODES` (what a program keys on, as
    the text may be reworded)."""

    def __new__(cls, code: str, text: str) -> "BenchWarning":
        if code not in WARNING_CODES:
            raise ValueError(f"unknown warning code {code!r}")
        self = super().__new__(cls, text)
        self.code = code
        return self

    def __getnewargs__(self):
        return self.code, str(self)

    @classmethod
    def read(cls, item) -> "BenchWarning":
        """A warning as a document, a sidecar or the logbook stores it
        (``{"code", "text"}``; a plain text from before codes is
        "unclassified")."""
        if isinstance(item, BenchWarning):
            return item
        if isinstance(item, dict):
            code = item.get("code")
            return cls(code if code in WARNING_CODES else "unclassified", str(item.get("text", "")))
        return cls("unclassified", str(item))

    def to_dict(self) -> dict:
        return {"code": self.code, "text": str(self)}


def read_warnings(items) -> tuple[BenchWarning, ...]:
    """Stored warnings (a sidecar's, a document's) as :class:`BenchWarning`."""
    return tuple(BenchWarning.read(w) for w in items or ())


def warning_docs(items) -> list[dict]:
    """Warnings as every document stores them: ``{"code", "text"}`` each."""
    return [BenchWarning.read(w).to_dict() for w in items or ()]
