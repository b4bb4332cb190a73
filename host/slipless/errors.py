"""Errors by origin: bad user input vs. a misuse of the API.

Damaged bytes from a board are never raised: decoders count them. What is
raised here reaches the command line as one line on stderr and a non-zero exit.
"""


class SliplessError(Exception):
    """Root of every error slipless reports to a user."""


class InputError(SliplessError):
    """A file or option the user gave cannot be used (missing, empty, wrong kind)."""


class ProtocolVersionError(SliplessError):
    """Frames pass their CRC but speak a protocol version this release does not know."""
