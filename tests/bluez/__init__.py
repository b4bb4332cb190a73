"""A double of the BlueZ daemon's D-Bus API (org.bluez on the system bus), for
running bleak's own BlueZ back end, unmodified, where no kernel Bluetooth and
no radio exist.

daemon.py starts a private dbus-daemon on a unix socket in a temporary folder
(bleak is pointed at it with DBUS_SYSTEM_BUS_ADDRESS); double.py exports the
objects bluetoothd would (adapter, devices, GATT services, characteristics,
descriptors) with dbus-fast's server-side API and carries their traffic over
bumble's virtual link to a peripheral (the board's own firmware in the tests);
harness.py runs the double and the board on a loop of their own, in a thread,
so the real `slipless` command line can run on the main thread.
"""
