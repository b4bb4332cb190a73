"""The live view: what a run looks like while it happens.

state.py (a decoder sink: decimated streams, coil, loss so far and by angle,
clock offset, board health) and alarms.py (rules over that state) are sans-IO;
server.py serves the page (static/) on 127.0.0.1 and pushes snapshots over a
WebSocket; replay.py plays a capture back at real or faster speed.
"""
