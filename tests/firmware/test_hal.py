"""hal.py on the stand-in `machine` (tests/firmware/sim_machine.py, a mock:
the WebAssembly port has no hardware), run on real MicroPython: calibrated
ADC reads where the port has them, the fallback scaling where it does not,
and the Pico W profiles that must not read the radio's pins."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

HERE = Path(__file__).resolve().parent
PROFILES = HERE.parents[1] / "firmware" / "profiles"
MACHINE = {"/lib/machine.py": (HERE / "sim_machine.py").read_text()}


def profile(name: str) -> dict:
    return json.loads((PROFILES / f"{name}.json").read_text())


def on_board(micropython, prof: dict, script: str) -> list:
    code = f"""
import json, machine, hal
prof = json.loads({json.dumps(prof)!r})
{script}
"""
    return json.loads(micropython(code, files=MACHINE).strip().split("\n")[-1])


def test_esp32_reads_calibrated_microvolts(micropython) -> None:
    # MicroPython docs, esp32 quick reference: ADC.read_uv() returns a calibrated
    # input voltage in microvolts from the chip's eFuse values, with millivolt
    # resolution. The stand-in's read_uv returns a value the test sets.
    out = on_board(micropython, profile("esp32-devkitc"), """
machine.ADC = machine.CalibratedADC
machine.CalibratedADC.UV[0] = 1_234_000
hw = hal.BoardHW(prof)
adc0 = hw.channel('adc0')
machine.CalibratedADC.UV[0] = 1_950_000
print(json.dumps([adc0(), hw.battery_mv()]))
""")
    assert out == [1950, 3900]  # 1.95 V at the pin; battery behind a 2:1 divider (profile)


def test_fallback_scales_read_u16(micropython) -> None:
    # No read_uv (the rp2 port): read_u16 spans 0..65535 over the reference
    # (MicroPython docs, machine.ADC.read_u16), 3300 mV unless the profile says.
    prof = dict(profile("pico-w"), battery={"pin": 28, "divider": 3.0})
    u16 = 39718
    out = on_board(micropython, prof, f"""
machine.ADC.U16[0] = {u16}
hw = hal.BoardHW(prof)
print(json.dumps([hw.channel('adc0')(), hw.battery_mv(),
                  [e for e in machine.LOG if e[0] == 'adc']]))
""")
    pin_mv = u16 / 65535 * 3300
    assert abs(out[0] - pin_mv) <= 1
    assert abs(out[1] - 3 * pin_mv) <= 3
    assert ["adc", 28] in out[2] and ["adc", 26] in out[2]


@pytest.mark.parametrize("name", ["pico-w", "pico2-w"])
def test_pico_w_profiles_leave_the_radio_alone(micropython, name) -> None:
    # Pico W / Pico 2 W: ADC3 = GP29 (VSYS/3) is also the wireless chip's SPI
    # clock, and GP23-25 drive the chip too (Raspberry Pi Pico 2 W schematic:
    # "GPIO 23 24 25 29 are used for the wireless interface"; MicroPython
    # discussion #10421: reading ADC(29) on a Pico W needs GP25 driven high and
    # GP29 reconfigured, which stops the radio). As shipped the profiles report
    # battery 0 (unknown) and never open an ADC there; a battery spec on those
    # pins is refused with a clear message.
    prof = profile(name)
    out = on_board(micropython, prof, """
hw = hal.BoardHW(prof)
made = [e for e in machine.LOG if e[0] == 'adc']
errors = []
for bat in ({'adc': 3, 'divider': 3.0}, {'pin': 29, 'divider': 3.0}):
    try:
        hal.BoardHW(dict(prof, battery=bat))
        errors.append(None)
    except ValueError as e:
        errors.append(str(e))
print(json.dumps([hw.battery_mv(), made, errors]))
""")
    battery_mv, made, errors = out
    assert battery_mv == 0
    assert made == [["adc", 4]]  # only ADC4, the chip's temperature sensor (not a pin)
    assert errors[0] == f"battery: ADC3 is shared with the wireless chip on {name}"
    assert errors[1] == f"battery: GP29 is used by the wireless chip on {name}"


def test_pico_w_profiles_agree() -> None:
    # Same wireless chip (CYW43439) on both boards: same radio pins, same stack.
    a, b = profile("pico-w"), profile("pico2-w")
    for key in ("battery", "radio_pins", "radio_adc", "ble"):
        assert a[key] == b[key], key
    assert a["ble"]["notify_queue"] == "unbounded"
    assert profile("esp32-devkitc")["ble"]["notify_queue"] == "refuses"
    assert "GP29" in a["battery"]["why"] and "no battery channel" in a["description"]
