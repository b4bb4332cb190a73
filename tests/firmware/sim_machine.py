"""A stand-in for MicroPython's `machine` module (a mock: the WebAssembly port
has no hardware). It logs every pin write in order, so a test can see that the
H-bridge is driven off before anything else happens at boot, and its watchdog
ends the run after a set number of feeds (KeyboardInterrupt, which the board's
loop does not catch). Its ADC logs what it is made on and has only read_u16()
(as the rp2 port); CalibratedADC adds read_uv() as the ESP32 port has it (the
values here are set by the test, not calibrated)."""

LOG = []
FEEDS_LEFT = [300]


class Pin:
    OUT = 1
    IN = 0
    IRQ_RISING = 1

    def __init__(self, pin, mode=None, value=None):
        self.pin = pin
        self.v = 0
        if value is not None:
            self.value(value)

    def value(self, v=None):
        if v is None:
            return self.v
        self.v = v
        LOG.append(("pin", self.pin, v))

    def irq(self, handler, trigger):
        self.handler = handler


class ADC:
    ATTN_0DB, ATTN_2_5DB, ATTN_6DB, ATTN_11DB = 0, 1, 2, 3
    U16 = [None]  # a fixed read_u16() value for every ADC, or None: a sawtooth

    def __init__(self, src):
        self.k = 0
        LOG.append(("adc", src.pin if isinstance(src, Pin) else src))

    def atten(self, a):
        pass

    def read_u16(self):
        if self.U16[0] is not None:
            return self.U16[0]
        self.k = (self.k + 997) & 0xFFFF
        return self.k


class CalibratedADC(ADC):
    UV = [1650000]  # what read_uv() returns, microvolts

    def read_uv(self):
        return self.UV[0]


class I2C:
    def __init__(self, *a, **kw):
        pass

    def writeto_mem(self, addr, reg, data):
        pass

    def readfrom_mem_into(self, addr, reg, buf):
        buf[0] = 0x12
        buf[1] = 0x34


class WDT:
    def __init__(self, timeout=0):
        LOG.append(("wdt", timeout))

    def feed(self):
        FEEDS_LEFT[0] -= 1
        if FEEDS_LEFT[0] <= 0:
            raise KeyboardInterrupt
