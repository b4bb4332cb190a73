"""The BlueZ daemon's D-Bus API, as far as bleak's BlueZ back end uses it, over
bumble's virtual link.

What bluetoothd would publish on the system bus is exported here with
dbus-fast's server-side API, under the well-known name org.bluez:

- `/` ObjectManager: GetManagedObjects, InterfacesAdded / InterfacesRemoved
  (sent from `/`, as bluetoothd sends them);
- `/org/bluez/hci0` org.bluez.Adapter1: SetDiscoveryFilter, StartDiscovery,
  StopDiscovery, RemoveDevice, Powered, Discovering, Roles;
- `.../dev_XX_XX_XX_XX_XX_XX` org.bluez.Device1 from advertisements (Name,
  Alias, RSSI, UUIDs, ServiceData, ManufacturerData), Connect / Disconnect,
  Connected and ServicesResolved changes;
- `.../serviceSSSS`, `.../charCCCC`, `.../descDDDD` org.bluez.GattService1,
  GattCharacteristic1 and GattDescriptor1 after a connection: ReadValue,
  WriteValue, StartNotify / StopNotify (notifications as Value changes),
  AcquireNotify and AcquireWrite (datagrams on a SOCK_SEQPACKET socket pair,
  the far end passed as a unix fd), MTU.

Behind it a bumble Device is the adapter's controller: StartDiscovery scans,
Connect connects, exchanges the MTU (BlueZ asks for 517, the largest LE ATT
MTU) and discovers every service, characteristic and descriptor before it
publishes them; a bumble disconnection turns into ServicesResolved and
Connected false and the GATT objects go away. Paths name ATT handles in hex as
bluetoothd's do (service: its first handle; characteristic: its declaration
handle, one before the value's; descriptor: its own handle; from memory of
bluetoothd's object paths). Not modelled: pairing and agents, BR/EDR,
advertisement monitors (passive scanning), bluetoothd's GATT cache across
connections, several adapters, per-client discovery sessions.
"""

import asyncio
import contextlib
import socket
from collections.abc import Callable
from typing import Annotated, Any

from bumble.core import UUID
from bumble.device import Connection, Device, Peer
from bumble.gatt_client import CharacteristicProxy, DescriptorProxy, ServiceProxy
from bumble.hci import Address
from dbus_fast import DBusError, Variant
from dbus_fast.aio import MessageBus
from dbus_fast.annotations import DBusSignature
from dbus_fast.service import PropertyAccess, ServiceInterface, dbus_property, method

BLUEZ = "org.bluez"
ADAPTER_PATH = "/org/bluez/hci0"
ERR = "org.bluez.Error."
BLUEZ_MTU = 517  # what bluetoothd asks for in its MTU exchange: the largest LE ATT MTU
SOCKET_HANDOVER_S = 0.25  # our copy of a passed fd is closed this long after the reply went
READ = PropertyAccess.READ

# D-Bus types of the API's arguments and properties
Str = Annotated[str, DBusSignature("s")]
Bool = Annotated[bool, DBusSignature("b")]
ObjPath = Annotated[str, DBusSignature("o")]
StrList = Annotated[list[str], DBusSignature("as")]
Bytes = Annotated[bytes, DBusSignature("ay")]
Options = Annotated[dict[str, Variant], DBusSignature("a{sv}")]
ByCompany = Annotated[dict[int, Variant], DBusSignature("a{qv}")]
U16 = Annotated[int, DBusSignature("q")]
I16 = Annotated[int, DBusSignature("n")]
FdMtu = Annotated[list[int], DBusSignature("hq")]  # a unix fd and the ATT MTU

# GATT characteristic properties (Core Specification Vol 3 Part G 3.3.1.1) -> BlueZ Flags
FLAG_NAMES = ((0x01, "broadcast"), (0x02, "read"), (0x04, "write-without-response"),
              (0x08, "write"), (0x10, "notify"), (0x20, "indicate"),
              (0x40, "authenticated-signed-writes"), (0x80, "extended-properties"))


def full_uuid(u: UUID) -> str:
    """bumble UUID -> the lower-case 128-bit text BlueZ uses for every UUID."""
    h = bytes(reversed(u.to_bytes(force_128=True))).hex()
    return f"{h[:8]}-{h[8:12]}-{h[12:16]}-{h[16:20]}-{h[20:]}"


def device_path(address: str) -> str:
    return f"{ADAPTER_PATH}/dev_{address.upper().replace(':', '_')}"


class ObjectBus(MessageBus):
    """bluetoothd sends ObjectManager signals from `/`; dbus-fast would send them
    from the object's own path."""

    def _emit_interface_added(self, path: str, interface: ServiceInterface) -> None:
        def got(_iface: Any, values: Any, _user: Any, err: Exception | None) -> None:
            if err is None:
                self._signal_from_root("InterfacesAdded", "oa{sa{sv}}", [path, {interface.name: values}])

        ServiceInterface._get_all_property_values(interface, got)

    def _emit_interface_removed(self, path: str, removed: list[str]) -> None:
        self._signal_from_root("InterfacesRemoved", "oas", [path, removed])

    def _signal_from_root(self, member: str, signature: str, body: list[Any]) -> None:
        from dbus_fast import Message

        if self.connected:
            self.send(Message.new_signal("/", "org.freedesktop.DBus.ObjectManager", member,
                                         signature, body))


class Adapter1(ServiceInterface):
    def __init__(self, double: "BluezDouble", address: str, powered: bool) -> None:
        super().__init__("org.bluez.Adapter1")
        self.double = double
        self.address = address
        self.powered = powered
        self.discovering = False
        self.filters: list[dict[str, Any]] = []  # every SetDiscoveryFilter, for the tests

    @dbus_property(access=READ)
    def Address(self) -> Str:
        return self.address

    @dbus_property(access=READ)
    def AddressType(self) -> Str:
        return "public"

    @dbus_property(access=READ)
    def Name(self) -> Str:
        return "double"

    @dbus_property(access=READ)
    def Alias(self) -> Str:
        return "double"

    @dbus_property(access=READ)
    def Powered(self) -> Bool:
        return self.powered

    @dbus_property(access=READ)
    def Discoverable(self) -> Bool:
        return False

    @dbus_property(access=READ)
    def Pairable(self) -> Bool:
        return False

    @dbus_property(access=READ)
    def Discovering(self) -> Bool:
        return self.discovering

    @dbus_property(access=READ)
    def UUIDs(self) -> StrList:
        return []

    @dbus_property(access=READ)
    def Roles(self) -> StrList:
        return ["central", "peripheral"]

    @method()
    def SetDiscoveryFilter(self, filters: Options) -> None:
        self.filters.append({k: v.value for k, v in filters.items()})
        uuids = filters.get("UUIDs")
        self.double.uuid_filter = {u.lower() for u in uuids.value} if uuids else set()

    @method()
    def GetDiscoveryFilters(self) -> StrList:
        return ["UUIDs", "RSSI", "Pathloss", "Transport", "DuplicateData", "Discoverable", "Pattern"]

    @method()
    async def StartDiscovery(self) -> None:
        if not self.powered:
            raise DBusError(ERR + "NotReady", "Resource Not Ready")
        self.double.discovery_sessions += 1
        if not self.discovering:
            await self.double.central.start_scanning(active=True, filter_duplicates=False)
            self.discovering = True
            self.emit_properties_changed({"Discovering": True})

    @method()
    async def StopDiscovery(self) -> None:
        if self.double.discovery_sessions == 0:
            raise DBusError(ERR + "Failed", "No discovery started")
        self.double.discovery_sessions -= 1
        if self.double.discovery_sessions == 0 and self.discovering:
            await self.double.central.stop_scanning()
            self.discovering = False
            self.emit_properties_changed({"Discovering": False})
            for dev in self.double.devices.values():
                dev.emit_properties_changed({}, ["RSSI"])  # bluetoothd forgets RSSI when it stops

    @method()
    async def RemoveDevice(self, path: ObjPath) -> None:
        dev = self.double.devices.get(path)
        if dev is None:
            raise DBusError(ERR + "DoesNotExist", "Does Not Exist")
        await dev.Disconnect()
        self.double.bus.unexport(path)
        del self.double.devices[path]


class Device1(ServiceInterface):
    def __init__(self, double: "BluezDouble", peer: Address) -> None:
        super().__init__("org.bluez.Device1")
        self.double = double
        self.peer = peer  # bumble's address, with its type
        self.address = peer.to_string(False)
        self.address_type = "public" if peer.is_public else "random"
        self.path = device_path(self.address)
        self.local_name = ""  # (`name` is the interface's own name in dbus-fast)
        self.rssi = -127
        self.uuids: list[str] = []
        self.service_data: dict[str, bytes] = {}
        self.manufacturer_data: dict[int, bytes] = {}
        self.connected = False
        self.resolved = False
        self.conn: Connection | None = None
        self.mtu = 23
        self.gatt: list[ServiceInterface] = []
        self.gatt_paths: list[str] = []
        self._connecting: asyncio.Task[None] | None = None
        self.connects = 0

    # -- properties --
    @dbus_property(access=READ)
    def Address(self) -> Str:
        return self.address

    @dbus_property(access=READ)
    def AddressType(self) -> Str:
        return self.address_type

    @dbus_property(access=READ)
    def Name(self) -> Str:
        return self.local_name

    @dbus_property(access=READ)
    def Alias(self) -> Str:
        return self.local_name or self.address.replace(":", "-")

    @dbus_property(access=READ)
    def Adapter(self) -> ObjPath:
        return ADAPTER_PATH

    @dbus_property(access=READ)
    def Paired(self) -> Bool:
        return False

    @dbus_property(access=READ)
    def Bonded(self) -> Bool:
        return False

    @dbus_property(access=READ)
    def Trusted(self) -> Bool:
        return False

    @dbus_property(access=READ)
    def Blocked(self) -> Bool:
        return False

    @dbus_property(access=READ)
    def LegacyPairing(self) -> Bool:
        return False

    @dbus_property(access=READ)
    def Connected(self) -> Bool:
        return self.connected

    @dbus_property(access=READ)
    def ServicesResolved(self) -> Bool:
        return self.resolved

    @dbus_property(access=READ)
    def RSSI(self) -> I16:
        return self.rssi

    @dbus_property(access=READ)
    def UUIDs(self) -> StrList:
        return self.uuids

    @dbus_property(access=READ)
    def ServiceData(self) -> Options:
        return {k: Variant("ay", v) for k, v in self.service_data.items()}

    @dbus_property(access=READ)
    def ManufacturerData(self) -> ByCompany:
        return {k: Variant("ay", v) for k, v in self.manufacturer_data.items()}

    # -- advertising --
    def advertised(self, adv: Any) -> None:
        """A merged advertisement (+ scan response) from bumble: the properties that
        came with it, signalled when they changed, as bluetoothd does."""
        data = adv.data
        changed: dict[str, Any] = {}
        name = data.get(data.COMPLETE_LOCAL_NAME) or data.get(data.SHORTENED_LOCAL_NAME)
        if name and str(name) != self.local_name:
            self.local_name = str(name)
            changed["Name"] = self.local_name
            changed["Alias"] = self.local_name
        uuids = [full_uuid(u) for kind in (
            data.COMPLETE_LIST_OF_16_BIT_SERVICE_CLASS_UUIDS,
            data.INCOMPLETE_LIST_OF_16_BIT_SERVICE_CLASS_UUIDS,
            data.COMPLETE_LIST_OF_128_BIT_SERVICE_CLASS_UUIDS,
            data.INCOMPLETE_LIST_OF_128_BIT_SERVICE_CLASS_UUIDS) for u in (data.get(kind) or [])]
        merged = self.uuids + [u for u in uuids if u not in self.uuids]
        if merged != self.uuids:
            self.uuids = merged
            changed["UUIDs"] = merged
        for cid, payload in data.get_all(data.MANUFACTURER_SPECIFIC_DATA) or []:
            if self.manufacturer_data.get(cid) != bytes(payload):
                self.manufacturer_data[cid] = bytes(payload)
                changed["ManufacturerData"] = {k: Variant("ay", v)
                                               for k, v in self.manufacturer_data.items()}
        rssi = adv.rssi if adv.rssi != adv.RSSI_NOT_AVAILABLE else -127
        # Each new discovery reports RSSI afresh (it was invalidated at the last stop).
        changed["RSSI"] = rssi
        self.rssi = rssi
        self.emit_properties_changed(changed)

    # -- connection --
    @method()
    async def Connect(self) -> None:
        if self.connected:
            return
        if self._connecting is not None:
            raise DBusError(ERR + "InProgress", "In Progress")
        self._connecting = asyncio.ensure_future(self._connect())
        try:
            await self._connecting
        except asyncio.CancelledError as exc:
            raise DBusError(ERR + "Failed", "Operation canceled") from exc
        except DBusError:
            raise
        except Exception as exc:  # bumble's failure, as bluetoothd reports one
            raise DBusError(ERR + "Failed", f"le-connection-abort-by-remote ({exc})") from exc
        finally:
            self._connecting = None

    async def _connect(self) -> None:
        conn = await self.double.central.connect(self.peer, timeout=self.double.connect_timeout_s)
        self.conn = conn
        self.connects += 1
        conn.on(conn.EVENT_DISCONNECTION, lambda reason: self._gone(conn, reason))
        conn.on(conn.EVENT_CONNECTION_ATT_MTU_UPDATE, lambda: self._mtu_changed(conn.att_mtu))
        self.connected = True
        self.emit_properties_changed({"Connected": True})
        peer = Peer(conn)
        self.mtu = await peer.request_mtu(BLUEZ_MTU)
        services = await peer.discover_services()
        for svc in services:
            chars = await svc.discover_characteristics()
            for c in chars:
                await c.discover_descriptors()
        if conn is not self.conn:
            raise DBusError(ERR + "Failed", "le-connection-abort-by-remote")
        self._publish(services)
        self.resolved = True
        self.emit_properties_changed({"ServicesResolved": True})

    def _publish(self, services: list[ServiceProxy]) -> None:
        for svc in services:
            spath = f"{self.path}/service{svc.handle:04x}"
            self._export(spath, GattService1(full_uuid(svc.uuid), self.path, svc.handle))
            for c in svc.characteristics:
                cpath = f"{spath}/char{c.handle - 1:04x}"
                char = GattCharacteristic1(self, c, spath, cpath)
                self._export(cpath, char)
                for d in c.descriptors:
                    self._export(f"{cpath}/desc{d.handle:04x}", GattDescriptor1(d, cpath))

    def _export(self, path: str, iface: ServiceInterface) -> None:
        self.double.bus.export(path, iface)
        self.gatt.append(iface)
        self.gatt_paths.append(path)

    def _mtu_changed(self, mtu: int) -> None:
        self.mtu = mtu
        for iface in self.gatt:
            if isinstance(iface, GattCharacteristic1):
                iface.emit_properties_changed({"MTU": mtu})

    def _gone(self, conn: Connection, reason: int) -> None:
        if conn is not self.conn:
            return
        self.conn = None
        for iface in self.gatt:
            if isinstance(iface, GattCharacteristic1):
                iface.link_lost()
        self.connected = self.resolved = False
        self.emit_properties_changed({"ServicesResolved": False, "Connected": False})
        for path in reversed(self.gatt_paths):
            self.double.bus.unexport(path)
        self.gatt.clear()
        self.gatt_paths.clear()
        self.double.disconnections.append(reason)

    @method()
    async def Disconnect(self) -> None:
        if self._connecting is not None:
            self._connecting.cancel()  # as bluetoothd does: a Disconnect ends a pending Connect
        conn = self.conn
        if conn is None:
            return
        gone = asyncio.get_running_loop().create_future()
        conn.on(conn.EVENT_DISCONNECTION, lambda _r: gone.done() or gone.set_result(None))
        with contextlib.suppress(Exception):
            await conn.disconnect()
        with contextlib.suppress(TimeoutError):
            await asyncio.wait_for(gone, 5.0)

    @method()
    def Pair(self) -> None:
        raise DBusError(ERR + "NotSupported", "Operation is not supported")

    @method()
    def CancelPairing(self) -> None:
        raise DBusError(ERR + "DoesNotExist", "Does Not Exist")


class GattService1(ServiceInterface):
    def __init__(self, uuid: str, device: str, handle: int) -> None:
        super().__init__("org.bluez.GattService1")
        self.uuid = uuid
        self.device = device
        self.handle = handle

    @dbus_property(access=READ)
    def UUID(self) -> Str:
        return self.uuid

    @dbus_property(access=READ)
    def Device(self) -> ObjPath:
        return self.device

    @dbus_property(access=READ)
    def Primary(self) -> Bool:
        return True

    @dbus_property(access=READ)
    def Handle(self) -> U16:
        return self.handle


class GattCharacteristic1(ServiceInterface):
    def __init__(self, dev: Device1, proxy: CharacteristicProxy, service: str, path: str) -> None:
        super().__init__("org.bluez.GattCharacteristic1")
        self.dev = dev
        self.proxy = proxy
        self.service = service
        self.path = path
        self.value = b""
        self.notifying = False
        self.notify_sock: socket.socket | None = None
        self.write_sock: socket.socket | None = None
        self.notify_dropped = 0  # datagrams the acquired socket had no room for
        self.flags = [name for bit, name in FLAG_NAMES if int(proxy.properties) & bit]

    @dbus_property(access=READ)
    def UUID(self) -> Str:
        return full_uuid(self.proxy.uuid)

    @dbus_property(access=READ)
    def Service(self) -> ObjPath:
        return self.service

    @dbus_property(access=READ)
    def Value(self) -> Bytes:
        return self.value

    @dbus_property(access=READ)
    def Notifying(self) -> Bool:
        return self.notifying

    @dbus_property(access=READ)
    def NotifyAcquired(self) -> Bool:
        return self.notify_sock is not None

    @dbus_property(access=READ)
    def WriteAcquired(self) -> Bool:
        return self.write_sock is not None

    @dbus_property(access=READ)
    def Flags(self) -> StrList:
        return self.flags

    @dbus_property(access=READ)
    def MTU(self) -> U16:
        return self.dev.mtu

    @dbus_property(access=READ)
    def Handle(self) -> U16:
        return self.proxy.handle

    # -- reads and writes --
    @method()
    async def ReadValue(self, options: Options) -> Bytes:
        self.value = bytes(await self.proxy.read_value())
        return self.value

    @method()
    async def WriteValue(self, value: Bytes, options: Options) -> None:
        if self.write_sock is not None:
            raise DBusError(ERR + "NotPermitted", "Write acquired")
        kind = options["type"].value if "type" in options else (
            "request" if "write" in self.flags else "command")
        await self.proxy.write_value(bytes(value), with_response=kind == "request")
        self.double_log("write", bytes(value), kind)

    @method()
    def AcquireWrite(self, options: Options) -> FdMtu:
        if "write-without-response" not in self.flags:
            raise DBusError(ERR + "NotSupported", "Operation is not supported")
        if self.write_sock is not None:
            raise DBusError(ERR + "NotPermitted", "Write acquired")
        ours, theirs = self._pair()
        self.write_sock = ours
        loop = asyncio.get_running_loop()
        loop.add_reader(ours.fileno(), self._written)
        self.emit_properties_changed({"WriteAcquired": True})
        return [theirs.fileno(), self.dev.mtu]

    def _written(self) -> None:
        sock = self.write_sock
        assert sock is not None
        try:
            data = sock.recv(self.dev.mtu)
        except OSError:
            data = b""
        if not data:
            self._release_write()
            return
        self.double_log("write", data, "acquired")
        asyncio.ensure_future(self.proxy.write_value(data, with_response=False))

    def _release_write(self) -> None:
        if self.write_sock is not None:
            asyncio.get_running_loop().remove_reader(self.write_sock.fileno())
            self.write_sock.close()
            self.write_sock = None
            self.emit_properties_changed({"WriteAcquired": False})

    # -- notifications --
    @method()
    async def StartNotify(self) -> None:
        if "notify" not in self.flags and "indicate" not in self.flags:
            raise DBusError(ERR + "NotSupported", "Operation is not supported")
        if self.notify_sock is not None:
            raise DBusError(ERR + "NotPermitted", "Notify acquired")
        if self.notifying:
            return
        await self.proxy.subscribe(self._notified)
        self.notifying = True
        self.emit_properties_changed({"Notifying": True})
        self.double_log("start_notify")

    @method()
    async def StopNotify(self) -> None:
        if not self.notifying or self.notify_sock is not None:
            raise DBusError(ERR + "Failed", "No notify session started")
        await self._unsubscribe()
        self.notifying = False
        self.emit_properties_changed({"Notifying": False})

    @method()
    async def AcquireNotify(self, options: Options) -> FdMtu:
        if "notify" not in self.flags and "indicate" not in self.flags:
            raise DBusError(ERR + "NotSupported", "Operation is not supported")
        if self.notifying or self.notify_sock is not None:
            raise DBusError(ERR + "NotPermitted", "Notify acquired")
        ours, theirs = self._pair()
        self.notify_sock = ours
        ours.setblocking(False)
        # bleak closes its end to release; bluetoothd sees the hang-up on its end
        asyncio.get_running_loop().add_reader(ours.fileno(), self._notify_hangup)
        await self.proxy.subscribe(self._notified)
        self.notifying = True
        self.emit_properties_changed({"NotifyAcquired": True, "Notifying": True})
        self.double_log("acquire_notify")
        return [theirs.fileno(), self.dev.mtu]

    def _notified(self, value: bytes) -> None:
        value = bytes(value)
        if self.notify_sock is not None:
            try:
                self.notify_sock.send(value)
            except BlockingIOError:
                self.notify_dropped += 1
            except OSError:
                self._release_notify()
            return
        self.value = value
        self.emit_properties_changed({"Value": value})

    def _notify_hangup(self) -> None:
        assert self.notify_sock is not None
        try:
            data = self.notify_sock.recv(1)
        except BlockingIOError:
            return
        except OSError:
            data = b""
        if not data:
            self._release_notify()
            if self.dev.conn is not None:
                asyncio.ensure_future(self._unsubscribe())

    def _release_notify(self) -> None:
        if self.notify_sock is not None:
            asyncio.get_running_loop().remove_reader(self.notify_sock.fileno())
            self.notify_sock.close()
            self.notify_sock = None
            self.notifying = False
            self.emit_properties_changed({"NotifyAcquired": False, "Notifying": False})

    async def _unsubscribe(self) -> None:
        with contextlib.suppress(Exception):  # the link may be gone already
            await self.proxy.unsubscribe(self._notified)

    def link_lost(self) -> None:
        """The connection ended: acquired sockets hang up, notifications stop."""
        self._release_notify()
        self._release_write()
        if self.notifying:
            self.notifying = False
            self.emit_properties_changed({"Notifying": False})

    def _pair(self) -> tuple[socket.socket, socket.socket]:
        ours, theirs = socket.socketpair(socket.AF_UNIX, socket.SOCK_SEQPACKET)
        # our copy of the far end must close (so bleak's close is a hang-up on ours),
        # but only once the reply carrying it has been written to the bus
        asyncio.get_running_loop().call_later(SOCKET_HANDOVER_S, theirs.close)
        return ours, theirs

    def double_log(self, *what: Any) -> None:
        self.dev.double.log.append((self.path, *what))


class GattDescriptor1(ServiceInterface):
    def __init__(self, proxy: DescriptorProxy, characteristic: str) -> None:
        super().__init__("org.bluez.GattDescriptor1")
        self.proxy = proxy
        self.characteristic = characteristic

    @dbus_property(access=READ)
    def UUID(self) -> Str:
        return full_uuid(self.proxy.type)

    @dbus_property(access=READ)
    def Characteristic(self) -> ObjPath:
        return self.characteristic

    @dbus_property(access=READ)
    def Value(self) -> Bytes:
        return b""

    @dbus_property(access=READ)
    def Handle(self) -> U16:
        return self.proxy.handle

    @method()
    async def ReadValue(self, options: Options) -> Bytes:
        return bytes(await self.proxy.read_value())


class BluezDouble:
    """org.bluez on `address` (a private bus), with `central` (a powered bumble
    Device) as the adapter's controller. adapter=False: no adapter at all."""

    def __init__(self, address: str, central: Device, adapter: bool = True,
                 powered: bool = True) -> None:
        self.address = address
        self.central = central
        self.bus = ObjectBus(bus_address=address, negotiate_unix_fd=True)
        self.devices: dict[str, Device1] = {}
        self.uuid_filter: set[str] = set()
        self.discovery_sessions = 0
        self.connect_timeout_s = 5.0
        self.disconnections: list[int] = []  # HCI reasons, one per link that ended
        self.log: list[tuple[Any, ...]] = []  # (char path, what, ...) for the tests
        self.adapter: Adapter1 | None = (
            Adapter1(self, central.public_address.to_string(False), powered) if adapter else None)
        self._on_adv: Callable[[Any], None] = self._advertisement

    async def start(self) -> None:
        await self.bus.connect()
        if self.adapter is not None:
            self.bus.export(ADAPTER_PATH, self.adapter)
        await self.bus.request_name(BLUEZ)
        self.central.on(self.central.EVENT_ADVERTISEMENT, self._on_adv)

    def _advertisement(self, adv: Any) -> None:
        if self.adapter is None or not self.adapter.discovering:
            return
        path = device_path(adv.address.to_string(False))
        dev = self.devices.get(path)
        if dev is None:
            dev = Device1(self, adv.address)
            dev.advertised(adv)
            if self.uuid_filter and not self.uuid_filter & set(dev.uuids):
                return  # the discovery filter hides it (bluetoothd creates no object)
            self.devices[path] = dev
            self.bus.export(path, dev)
            return
        if self.uuid_filter and not self.uuid_filter & set(dev.uuids):
            return
        dev.advertised(adv)

    def device(self, address: str) -> Device1:
        return self.devices[device_path(address)]

    async def stop(self) -> None:
        for dev in list(self.devices.values()):
            for iface in dev.gatt:
                if isinstance(iface, GattCharacteristic1):
                    iface.link_lost()
            if dev.conn is not None:
                with contextlib.suppress(Exception):
                    await dev.conn.disconnect()
        self.central.remove_listener(self.central.EVENT_ADVERTISEMENT, self._on_adv)
        self.bus.disconnect()
        with contextlib.suppress(Exception):
            await self.bus.wait_for_disconnect()
