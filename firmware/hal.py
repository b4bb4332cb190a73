"""Real hardware for the board core, built from a board profile.

The H-bridge pins are driven low the moment this object is made, before the
config is even read: the coil is off at every boot, watchdog resets included.
Every read used in the sampling loop returns a small int and allocates
nothing (buffers are made here, once). Only this module imports `machine`.

Voltages: channels of kind "adc" and the battery read in millivolts. Where the
port's ADC has read_uv() (ESP32: "a calibrated input voltage (before
attenuation) in microvolts" from the chip's eFuse values, with millivolt
resolution; MicroPython docs, esp32 quick reference) that is used; elsewhere
read_u16() is scaled by the profile's vref_mv (3300 unless it says), which
assumes an ideal converter. A profile may list pins and ADC channels the
radio uses (radio_pins, radio_adc); this module refuses to read them.
"""

import gc
import time

import machine
from coil import HBridge

from clock import Clock64

_ADS1115_CONVERSION = 0x00
_ADS1115_CONFIG = 0x01
_MPU6050_PWR_MGMT_1 = 0x6B
_MPU6050_GYRO_ZOUT_H = 0x47


VREF_MV = 3300  # ADC full scale where the port gives no calibration (profile: vref_mv)


def _pin_out(spec):
    return machine.Pin(spec, machine.Pin.OUT, value=0)


def check_not_radio(profile, spec, what):
    """Refuse a pin or ADC channel the profile says the radio uses."""
    if spec.get("pin") in profile.get("radio_pins", ()):
        raise ValueError("%s: GP%s is used by the wireless chip on %s"
                         % (what, spec["pin"], profile.get("name", "this board")))
    if spec.get("adc") in profile.get("radio_adc", ()):
        raise ValueError("%s: ADC%s is shared with the wireless chip on %s"
                         % (what, spec["adc"], profile.get("name", "this board")))


def _int16(buf):
    v = (buf[0] << 8) | buf[1]
    return v - 65536 if v & 0x8000 else v


class Adc:
    """Internal ADC in millivolts, averaged over `average` reads."""

    def __init__(self, spec, vref_mv=VREF_MV):
        self.adc = machine.ADC(machine.Pin(spec["pin"]))
        atten = spec.get("atten")
        if atten and hasattr(machine.ADC, "ATTN_11DB"):
            self.adc.atten({"0dB": machine.ADC.ATTN_0DB, "2.5dB": machine.ADC.ATTN_2_5DB,
                            "6dB": machine.ADC.ATTN_6DB, "11dB": machine.ADC.ATTN_11DB}[atten])
        self.n = spec.get("average", 1)
        self.vref_mv = vref_mv
        self.calibrated = hasattr(self.adc, "read_uv")

    def read(self):
        total = 0  # per-read millivolts, so the sum stays a small int
        if self.calibrated:
            for _ in range(self.n):
                total += self.adc.read_uv() // 1000  # type: ignore[attr-defined,unused-ignore]  # ESP32 only
        else:
            for _ in range(self.n):
                total += (self.adc.read_u16() * self.vref_mv + 32767) // 65535
        return total // self.n


class _I2cDevice:
    _buses = {}  # type: dict

    def __init__(self, spec):
        key = spec["i2c"]
        bus = self._buses.get(key)
        if bus is None:
            bus = machine.I2C(key, scl=machine.Pin(spec["scl"]), sda=machine.Pin(spec["sda"]),
                              freq=400000)
            self._buses[key] = bus
        self.bus = bus
        self.addr = spec["address"]
        self.buf = bytearray(2)


class Ads1115(_I2cDevice):
    """External 16-bit delta-sigma ADC in continuous mode (860 samples/s max)."""

    _GAINS = {0: 0x0000, 1: 0x0200, 2: 0x0400, 4: 0x0600, 8: 0x0800, 16: 0x0A00}

    def __init__(self, spec):
        super().__init__(spec)
        cfg = 0x4000 | (spec.get("mux", 0) << 12) | self._GAINS[spec.get("gain", 1)] | 0x00E0 | 0x0003
        self.bus.writeto_mem(self.addr, _ADS1115_CONFIG, bytes(((cfg >> 8) & 0xFF, cfg & 0xFF)))

    def read(self):
        self.bus.readfrom_mem_into(self.addr, _ADS1115_CONVERSION, self.buf)
        return _int16(self.buf)


class GyroZ(_I2cDevice):
    """MPU-6050 z-axis rate, raw counts (131 per deg/s at the default range)."""

    def __init__(self, spec):
        super().__init__(spec)
        self.bus.writeto_mem(self.addr, _MPU6050_PWR_MGMT_1, b"\x00")  # wake up

    def read(self):
        self.bus.readfrom_mem_into(self.addr, _MPU6050_GYRO_ZOUT_H, self.buf)
        return _int16(self.buf)


class IndexRate:
    """Rotation rate from a once-per-turn index pulse: milli-turns per second.

    The IRQ handler stores two ints and nothing else (no allocation in IRQs).
    """

    STALE_US = 5000000  # no pulse for this long: report 0 (stopped)

    def __init__(self, spec):
        self.last = time.ticks_us()
        self.period = 0
        self.pin = machine.Pin(spec["pin"], machine.Pin.IN)
        self.pin.irq(self._edge, machine.Pin.IRQ_RISING)

    def _edge(self, pin):
        t = time.ticks_us()
        self.period = time.ticks_diff(t, self.last)
        self.last = t

    def read(self):
        if self.period <= 0 or time.ticks_diff(time.ticks_us(), self.last) > self.STALE_US:
            return 0
        return 1000000000 // self.period


class BoardHW:
    def __init__(self, profile):
        hb = profile["hbridge"]
        self.bridge = HBridge(_pin_out(hb["in1"]), _pin_out(hb["in2"]), _pin_out(hb["enable"]))
        self.profile = profile
        self.clock = Clock64()
        self.on_frame = None
        self._wdt = None
        self.vref_mv = profile.get("vref_mv", VREF_MV)
        bat = profile.get("battery") or {}
        if bat.get("kind") == "none":  # the profile says why (e.g. the pin is the radio's)
            bat = {}
        check_not_radio(profile, bat, "battery")
        self._bat = machine.ADC(bat["adc"] if "adc" in bat else machine.Pin(bat["pin"])) if bat else None
        self._bat_uv = self._bat is not None and hasattr(self._bat, "read_uv")
        self._bat_div10 = int(bat.get("divider", 1.0) * 10)
        self._temp = profile.get("temperature", {}).get("kind")
        self._temp_adc = machine.ADC(4) if self._temp == "rp2_sensor" else None

    def channel(self, name):
        spec = self.profile["channels"][name]
        kind = spec["kind"]
        check_not_radio(self.profile, spec, "channel " + name)
        if kind == "adc":
            return Adc(spec, self.vref_mv).read
        if kind == "ads1115":
            return Ads1115(spec).read
        if kind == "mpu6050_gyro_z":
            return GyroZ(spec).read
        if kind == "index_rate":
            return IndexRate(spec).read
        if kind == "coil_state":
            return self.bridge.read_state
        raise ValueError("unknown channel kind " + kind)

    def ticks_ms(self):
        return time.ticks_ms()

    def battery_mv(self):
        """Battery voltage in mV; 0 means unknown (no battery channel)."""
        if self._bat is None:
            return 0
        if self._bat_uv:
            return self._bat.read_uv() * self._bat_div10 // 10000  # type: ignore[attr-defined,unused-ignore]
        return self._bat.read_u16() * self.vref_mv // 65535 * self._bat_div10 // 10

    def temp_cdeg(self):
        if self._temp_adc is not None:  # RP2040/RP2350 datasheet sensor formula, integer form
            mv = self._temp_adc.read_u16() * 3300 // 65535
            return 2700 - (mv - 706) * 100000 // 1721
        try:
            import esp32  # type: ignore[import-not-found,unused-ignore]  # ESP32 ports only
        except ImportError:
            return 0
        mcu = getattr(esp32, "mcu_temperature", None)  # S2/S3/C3: degrees C
        if mcu is not None:
            return mcu() * 100
        return (esp32.raw_temperature() - 32) * 500 // 9  # original ESP32: degrees F

    def free_ram(self):
        return gc.mem_free()

    def start_watchdog(self, timeout_ms):
        self._wdt = machine.WDT(timeout=timeout_ms)

    def feed_watchdog(self):
        if self._wdt is not None:
            self._wdt.feed()

    def next_run_id(self):
        """A new run id at every boot and START, kept across power cycles."""
        try:
            with open("/run_id") as f:
                n = int(f.read())
        except (OSError, ValueError):
            n = 0
        n = (n % 0xFFFF) + 1
        with open("/run_id", "w") as f:
            f.write(str(n))
        return n

    def save_config(self, text):
        with open("/config.json", "w") as f:
            f.write(text)
