"""The coil: an H-bridge with limits the board enforces, and the pulse program.

Safety first (see README, Safety): the coil is off when this object is made
(boot), on stop, on any error the main loop catches, after a lost link, and
whenever a limit trips. Limits: the longest time in one energised state
(max_on_ms) and the largest on-fraction over a window (max_duty); both are
capped by config.HARD_MAX_ON_MS / HARD_MAX_DUTY whatever the config says.
Times are ticks_ms values compared with ticks_diff.
"""

from compat import const, ticks_add, ticks_diff
from config import HARD_MAX_DUTY, HARD_MAX_ON_MS

# Reasons carried by EV_SAFETY events.
TRIP_ON_TIME = const(1)
TRIP_DUTY = const(2)
TRIP_LINK = const(3)
TRIP_ERROR = const(4)
TRIP_STOP = const(5)


class HBridge:
    """Two direction pins and an enable pin; any object with value(0/1) works."""

    def __init__(self, in1, in2, enable):
        self.in1 = in1
        self.in2 = in2
        self.enable = enable
        self.state = 0
        self.drive(0)

    def read_state(self):
        """The polarity being driven: a sample source for a coil_state stream."""
        return self.state

    def drive(self, state):
        self.state = state
        # Disable first and switch direction with the bridge off: no shoot-through.
        self.enable.value(0)
        self.in1.value(1 if state > 0 else 0)
        self.in2.value(1 if state < 0 else 0)
        if state:
            self.enable.value(1)


class Coil:
    def __init__(self, bridge, now_ms, max_on_ms, max_duty, window_ms):
        self.bridge = bridge
        self.max_on_ms = min(max_on_ms, HARD_MAX_ON_MS)
        self.max_duty = min(max_duty, HARD_MAX_DUTY)
        self.window_ms = window_ms
        self.budget_ms = int(self.max_duty * window_ms)  # ints from here on: no floats per loop
        self.state = 0
        self.since = now_ms  # on-time is charged up to here
        self.state_since = now_ms  # when the present state began (max_on_ms)
        # On-time bookkeeping over the duty window: the window in progress and
        # the one before it, so the estimate never forgets a burst at a boundary.
        self.win_start = now_ms
        self.on_this = 0
        self.on_prev = 0
        bridge.drive(0)

    def _account(self, now_ms):
        if self.state:
            self.on_this += ticks_diff(now_ms, self.since)
        self.since = now_ms
        while ticks_diff(now_ms, self.win_start) >= self.window_ms:
            self.win_start = ticks_add(self.win_start, self.window_ms)
            self.on_prev = self.on_this
            self.on_this = 0

    def duty_used_ms(self, now_ms):
        """On-time charged to the last window_ms (a sliding estimate: all of the
        window in progress plus the share of the previous one still inside)."""
        left = self.window_ms - ticks_diff(now_ms, self.win_start)
        share = left * 256 // self.window_ms  # 8-bit fraction keeps the product small
        return self.on_this + self.on_prev * share // 256

    def set(self, state, now_ms):
        """Switch to state -1, 0 or +1; return 0, or the trip reason if refused."""
        self._account(now_ms)
        if state and self.duty_used_ms(now_ms) >= self.budget_ms:
            self.off(now_ms)
            return TRIP_DUTY
        if state != self.state:
            self.state_since = now_ms
        self.state = state
        self.bridge.drive(state)
        return 0

    def off(self, now_ms):
        self._account(now_ms)
        self.state = 0
        self.bridge.drive(0)

    def check(self, now_ms):
        """Enforce the limits; return 0, or the trip reason after switching off."""
        if not self.state:
            return 0
        if ticks_diff(now_ms, self.state_since) >= self.max_on_ms:
            self.off(now_ms)
            return TRIP_ON_TIME
        self._account(now_ms)
        if self.duty_used_ms(now_ms) >= self.budget_ms:
            self.off(now_ms)
            return TRIP_DUTY
        return 0


class Program:
    """A pulse program: [state, ms] steps, repeated `repeat` times."""

    def __init__(self, steps, repeat):
        self.steps = steps
        self.repeat = repeat
        self.running = False
        self.done = False  # ran every cycle to the end (not stopped or tripped)
        self.index = 0
        self.cycle = 0
        self.step_start = 0

    def start(self, now_ms):
        self.running = len(self.steps) > 0
        self.done = False
        self.index = 0
        self.cycle = 0
        self.step_start = now_ms

    def stop(self):
        self.running = False

    def state(self):
        return self.steps[self.index][0] if self.running else 0

    def advance(self, now_ms):
        """Move past finished steps; return True if the step changed."""
        if not self.running:
            return False
        changed = False
        while self.running and ticks_diff(now_ms, self.step_start) >= self.steps[self.index][1]:
            self.step_start = ticks_add(self.step_start, self.steps[self.index][1])  # type: ignore[type-var]
            self.index += 1
            changed = True
            if self.index == len(self.steps):
                self.index = 0
                self.cycle += 1
                if self.cycle >= self.repeat:
                    self.running = False
                    self.done = True
        return changed
