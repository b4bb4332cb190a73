"""A private message bus: dbus-daemon on a unix socket in a temporary folder,
configured as a system bus that lets anyone own names and talk to anyone
(there is one user here and nothing to protect)."""

from __future__ import annotations

import shutil
import subprocess
from pathlib import Path

DBUS_DAEMON = "/usr/bin/dbus-daemon"
START_TIMEOUT_S = 10.0

CONFIG = """<!DOCTYPE busconfig PUBLIC "-//freedesktop//DTD D-Bus Bus Configuration 1.0//EN"
 "http://www.freedesktop.org/standards/dbus/1.0/busconfig.dtd">
<busconfig>
  <type>system</type>
  <listen>unix:path={socket}</listen>
  <auth>EXTERNAL</auth>
  <policy context="default">
    <allow user="*"/>
    <allow own="*"/>
    <allow send_destination="*"/>
    <allow receive_sender="*"/>
  </policy>
</busconfig>
"""


def daemon_path() -> str | None:
    """The dbus-daemon to run, or None when the machine has none (`make dbus`)."""
    return DBUS_DAEMON if Path(DBUS_DAEMON).exists() else shutil.which("dbus-daemon")


class PrivateBus:
    """dbus-daemon for one test; `address` is what DBUS_SYSTEM_BUS_ADDRESS gets."""

    def __init__(self, folder: Path) -> None:
        exe = daemon_path()
        if exe is None:
            raise FileNotFoundError("dbus-daemon")
        conf = folder / "bus.conf"
        conf.write_text(CONFIG.format(socket=folder / "bus"))
        self.proc = subprocess.Popen([exe, "--config-file", str(conf), "--nofork", "--print-address"],
                                     stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True)
        assert self.proc.stdout is not None
        self.address = self.proc.stdout.readline().strip()  # printed once it listens
        if not self.address:
            self.close()
            raise RuntimeError("dbus-daemon did not start")

    def close(self) -> None:
        self.proc.terminate()
        try:
            self.proc.wait(START_TIMEOUT_S)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.wait()
        if self.proc.stdout is not None:
            self.proc.stdout.close()
