"""Every error slipless raises, in one tree under SliplessError.

Damaged bytes from a board are never raised: decoders count them. What
reaches the command line is one line on stderr and a non-zero exit; the
internal signals (MalformedFrame, FitError, LinkError) are caught and
counted, reported or retried where they arise.
"""


class SliplessError(Exception):
    """Root of every error slipless reports to a user."""


class InputError(SliplessError):
    """A file or option the user gave cannot be used (missing, empty, wrong kind)."""


class ProtocolVersionError(SliplessError):
    """Frames pass their CRC but speak a protocol version this release does not know."""


class CaptureError(SliplessError):
    """The file is not a capture (bad magic, unknown version, bad header)."""


class MalformedFrame(SliplessError):
    """A body passed its CRC but does not match its kind's layout (a sender bug)."""


class FitError(SliplessError, ValueError):
    """Too few distinct points to fix a line or a knot."""


class FlashError(SliplessError):
    """The board refused, failed or did not answer; the flash did not complete."""


class BoardError(SliplessError):
    """The board could not be found or reached, did not answer in time, or refused."""


class LinkError(SliplessError):
    """The board could not be found, connected or subscribed to."""

    retry = True  # may trying again (after a back-off) help?


class NoBluetooth(LinkError):
    """No adapter, Bluetooth switched off, or not permitted to use it: waiting will
    not change that, the user must."""

    retry = False


class BoardNotFound(LinkError):
    """The scan ended without the board (off, out of range, still booting)."""


class ConnectFailed(LinkError):
    """The board was seen but the connection, service discovery or subscription failed."""


class WrongGatt(LinkError):
    """The board answers but lacks our service or characteristics: other firmware,
    or the operating system's GATT cache is stale."""

    retry = False
