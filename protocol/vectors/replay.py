"""Replay a golden-vector case through the encoder: case -> list of frame bytes.

Runs under MicroPython and CPython, so the board's encoder and the laptop's
copy are held to the same bytes. A case lists encoder calls ("ops"); each op
names the board and run, an Encoder method and its arguments.
"""

import wire


def build(case):
    encoders = {}
    frames = []
    for op in case["ops"]:
        key = (op["board"], op["run"])
        enc = encoders.get(key)
        if enc is None:
            enc = encoders[key] = wire.Encoder(op["board"], op["run"])
        if "seq" in op:
            enc.seq = op["seq"]
        frames.append(_one(enc, op))
    return frames


def _one(enc, op):
    name = op["op"]
    a = op.get("args", {})
    if name == "descriptor":
        streams = [(s[0], s[1], s[2], s[3], s[4], s[5], s[6], s[7]) for s in a["streams"]]
        n = enc.descriptor(a["tick"], a["tick_hz"], a["fw"], a["max_gap_ms"], a["n_streams"],
                           streams)
    elif name == "samples":
        n = enc.samples(a["stream"], a["tick"], a["type"], a["values"])
    elif name == "events":
        n = enc.events([(e[0], e[1], e[2]) for e in a["events"]])
    elif name == "status":
        n = enc.status(a["tick"], a["battery_mv"], a["temp_cdeg"], a["free_ram"],
                       a["queue_high"], a["dropped"], a["late"], a["jitter_us"])
    elif name == "sync":
        n = enc.sync(a["request"], a["host_ns"], a["rx_tick"], a["tx_tick"])
    elif name == "ack":
        n = enc.ack(a["request"], a["opcode"])
    elif name == "error":
        n = enc.error(a["request"], a["opcode"], a["code"], a["detail_a"], a["detail_b"])
    elif name == "end":
        n = enc.end(a["tick"], a["reason"], [(t[0], t[1]) for t in a["totals"]])
    elif name == "info":
        n = enc.info(a["request"], a["tick"], a["fw"], a["flags"], a["counter_floor"],
                     a["mirror_bytes"], bytes.fromhex(a["config_sha"]), a["name"], a["profile"])
    elif name == "firmware":
        n = enc.firmware(a["request"], a["files"], a["size"], bytes.fromhex(a["fw_sha"]))
    elif name == "start":
        n = enc.start(a["request"], a["duration_s"], a["label"])
    elif name == "stop":
        n = enc.command(wire.CMD_STOP, a["request"])
    elif name == "status_request":
        n = enc.command(wire.CMD_STATUS, a["request"])
    elif name == "info_request":
        n = enc.command(wire.CMD_INFO, a["request"])
    elif name == "set_config":
        n = enc.set_config(a["request"], a["key"], a["value"])
    elif name == "ping":
        n = enc.ping(a["request"], a["host_ns"])
    elif name == "resend":
        n = enc.resend(a["request"], a["first"], a["last"])
    elif name == "command":  # any opcode with its argument bytes (sealed commands)
        n = enc.command(a["opcode"], a["request"], bytes.fromhex(a["args"]))
    elif name == "raw":  # a frame of another version or kind, for forward-compatibility cases
        off = enc.begin(a["kind"])
        enc.body[0] = (a["version"] << 4) | a["kind"]
        payload = bytes.fromhex(a["payload"])
        enc.body[off : off + len(payload)] = payload
        n = enc.finish(off + len(payload))
    else:
        raise ValueError("unknown op " + name)
    return enc.frame(n)
