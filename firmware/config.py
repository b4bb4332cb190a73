"""Board configuration: load, validate, keep the last good one.

The same file runs on the board (at boot and on a set_config command) and on
the laptop (`slipless flash` validates before copying), so both sides refuse
the same mistakes with the same words. A config is plain JSON: see
config.example.json beside this file. Board profiles (pins, ADC kinds, gains)
live in profiles/*.json.
"""

import json

# Hard limits the board enforces whatever a config asks for (coil safety).
HARD_MAX_ON_MS = 10000  # longest time the coil may stay energised in one state
HARD_MAX_DUTY = 0.5  # largest fraction of a duty window the coil may be on
HARD_MIN_LINK_TIMEOUT_MS = 200
HARD_MAX_LINK_TIMEOUT_MS = 60000
MAX_STREAMS = 8
MAX_RATE_HZ = 5000
MAX_PROGRAM_STEPS = 32
TYPES = "bBhHiIf"

DEFAULTS = {
    "board_id": 1,
    "name": "slipless",
    "profile": "esp32-devkitc",
    "streams": [],
    "coil": {
        "program": [],
        "repeat": 1,
        "max_on_ms": 5000,
        "max_duty": 0.5,
        "duty_window_ms": 10000,
        "link_timeout_ms": 3000,
    },
    "link": {
        "status_every_ms": 5000,
        "descriptor_every_ms": 10000,
        "ring_frames": 64,
        "queue_frames": 24,
        "key_hex": "",
    },
    "mirror": {"enabled": False, "path": "/mirror.bin", "max_bytes": 1000000, "flush_every_ms": 1000},
}


class ConfigError(ValueError):
    """A config that cannot be used; the message names the field and the rule."""


def _shown(name):
    """A user's key as it may appear in a one-line message (repr if not plain)."""
    for ch in name:
        if not " " <= ch <= "~":
            return repr(name)
    return name


def _need(cond, where, rule):
    if not cond:
        raise ConfigError(where + ": " + rule)


def _int(d, key, where, lo, hi):
    v = d.get(key)
    _need(isinstance(v, int) and not isinstance(v, bool), where + "." + key, "must be a whole number")
    _need(lo <= v <= hi, where + "." + key, "must be between %d and %d" % (lo, hi))
    return v


def _num(d, key, where, lo, hi):
    v = d.get(key)
    _need(isinstance(v, (int, float)) and not isinstance(v, bool), where + "." + key, "must be a number")
    _need(lo <= v <= hi, where + "." + key, "must be between %s and %s" % (lo, hi))
    return v


def _text(d, key, where, max_len=32, empty=False):
    v = d.get(key)
    _need(isinstance(v, str), where + "." + key, "must be text")
    _need(empty or len(v) > 0, where + "." + key, "must not be empty")
    try:
        n = len(v.encode())
    except UnicodeError:  # a lone surrogate (a JSON "\ud800" escape) has no UTF-8 form
        n = -1
    _need(n >= 0, where + "." + key, "must be valid Unicode text")
    _need(n <= max_len, where + "." + key, "must be at most %d bytes" % max_len)
    return v


def _merge(defaults, given, where):
    _need(isinstance(given, dict), where, "must be an object")
    out = {}
    for k in given:
        _need(k in defaults, where + "." + _shown(k), "is not a known setting")
    for k, v in defaults.items():
        if isinstance(v, dict):
            out[k] = _merge(v, given.get(k, {}), where + "." + k)
        else:
            out[k] = given.get(k, v)
    return out


def validate(given):
    """Return a complete config (defaults filled in) or raise ConfigError."""
    c = _merge(DEFAULTS, given, "config")
    _int(c, "board_id", "config", 1, 0xFFFE)
    _text(c, "name", "config", 20)
    _text(c, "profile", "config")
    streams = c["streams"]
    _need(isinstance(streams, list), "config.streams", "must be a list")
    _need(len(streams) <= MAX_STREAMS, "config.streams", "at most %d streams" % MAX_STREAMS)
    seen = []
    for i, s in enumerate(streams):
        w = "config.streams[%d]" % i
        _need(isinstance(s, dict), w, "must be an object")
        for k in s:
            _need(k in ("id", "name", "unit", "source", "rate_hz", "type", "scale", "offset", "state"),
                  w + "." + _shown(k), "is not a known setting")
        sid = _int(s, "id", w, 0, 255)
        _need(sid not in seen, w + ".id", "is used twice")
        seen.append(sid)
        _text(s, "name", w)
        _text(s, "unit", w, empty=True)
        _text(s, "source", w)
        _num(s, "rate_hz", w, 0.01, MAX_RATE_HZ)  # period = round(1e6 / rate) us
        t = _text(s, "type", w, 1)
        _need(t in TYPES, w + ".type", "must be one of " + TYPES)
        _num(s, "scale", w, -1e30, 1e30)
        _need(s["scale"] != 0, w + ".scale", "must not be 0 (every value would read 0)")
        _num(s, "offset", w, -1e30, 1e30)
        _need(isinstance(s.get("state", False), bool), w + ".state", "must be true or false")
    coil = c["coil"]
    prog = coil["program"]
    _need(isinstance(prog, list) and len(prog) <= MAX_PROGRAM_STEPS, "config.coil.program",
          "must be a list of at most %d [state, ms] steps" % MAX_PROGRAM_STEPS)
    for i, step in enumerate(prog):
        w = "config.coil.program[%d]" % i
        _need(isinstance(step, list) and len(step) == 2, w, "must be [state, ms]")
        _need(step[0] in (-1, 0, 1) and not isinstance(step[0], bool), w, "state must be -1, 0 or 1")
        _need(isinstance(step[1], int) and 1 <= step[1] <= 3600000, w, "ms must be 1..3600000")
    _int(coil, "repeat", "config.coil", 1, 100000)
    on = _int(coil, "max_on_ms", "config.coil", 1, HARD_MAX_ON_MS)
    for i, step in enumerate(prog):
        _need(step[0] == 0 or step[1] <= on, "config.coil.program[%d]" % i,
              "on for longer than coil.max_on_ms (%d ms)" % on)
    _num(coil, "max_duty", "config.coil", 0.0, HARD_MAX_DUTY)
    _int(coil, "duty_window_ms", "config.coil", 100, 600000)
    _int(coil, "link_timeout_ms", "config.coil", HARD_MIN_LINK_TIMEOUT_MS, HARD_MAX_LINK_TIMEOUT_MS)
    link = c["link"]
    _int(link, "status_every_ms", "config.link", 100, 60000)
    _int(link, "descriptor_every_ms", "config.link", 100, 600000)
    ring = _int(link, "ring_frames", "config.link", 4, 4096)
    _int(link, "queue_frames", "config.link", 2, ring)
    key = _text(link, "key_hex", "config.link", 128, empty=True)
    _need(len(key) % 2 == 0 and all(ch in "0123456789abcdef" for ch in key), "config.link.key_hex",
          "must be lower-case hex")
    m = c["mirror"]
    _need(isinstance(m["enabled"], bool), "config.mirror.enabled", "must be true or false")
    _text(m, "path", "config.mirror", 64)
    _int(m, "max_bytes", "config.mirror", 4096, 1 << 30)
    _int(m, "flush_every_ms", "config.mirror", 10, 600000)
    return c


def period_us(stream):
    """The sampling period the board uses: whole microseconds."""
    return int(1000000 / stream["rate_hz"] + 0.5)


def check_profile(c, profile):
    """Every stream's source must be a channel of the board profile."""
    names = profile.get("channels", {})
    for i, s in enumerate(c["streams"]):
        _need(s["source"] in names, "config.streams[%d].source" % i,
              "'%s' is not a channel of profile %s (has: %s)"
              % (s["source"], profile.get("name", "?"), ", ".join(sorted(names))))


def parse(text):
    """JSON text -> validated config; raise ConfigError with one clear line."""
    try:
        given = json.loads(text)
    except ValueError:
        raise ConfigError("config: not valid JSON") from None
    except RuntimeError:  # nesting deeper than the parser's recursion limit
        raise ConfigError("config: nested too deeply") from None
    return validate(given)


def load(path, good_path):
    """Boot: use path if valid (and remember it as good), else the last good one.

    Returns (config, error text or None). Never raises for a bad file: a board
    that cannot read its config still boots, coil off, on the last good one
    or on the defaults.
    """
    try:
        with open(path) as f:
            text = f.read()
        c = parse(text)
    except (OSError, ConfigError) as exc:
        err = str(exc) if isinstance(exc, ConfigError) else "config: cannot read " + path
        try:
            with open(good_path) as f:
                return parse(f.read()), err
        except (OSError, ConfigError):
            return validate({}), err
    try:
        with open(good_path, "w") as f:
            f.write(text)
    except OSError:
        pass
    return c, None
