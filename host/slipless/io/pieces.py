"""What every input reader hands the decoder: (bytes, Arrival) pieces.

Shared by inputs.py and the readers it dispatches to (btsnoop.py), so the
readers need nothing from the dispatcher.
"""

from __future__ import annotations

from slipless.decode.decoder import Arrival

BTSNOOP_MAGIC = b"btsnoop\x00"
TX_SOURCE_BASE = 1 << 16  # commands the laptop wrote get their own byte streams

Piece = tuple[bytes | None, Arrival]  # data, or None: the link of arrival.source restarted
