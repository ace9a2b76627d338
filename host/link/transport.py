"""Transports of the dcrig link: one Link base class and the byte pipes under it.

Owns: opening ports and virtual cables, the receive deadline, resynchronisation and CRC
checking (through host.link.wire.Deframer), and the USB-serial latency-timer check.

Link is a template: the public send_frame()/recv_frame() do framing, CRC and deadlines;
subclasses implement only _read_raw(max_bytes, timeout_s) -> bytes (b"" on timeout),
_write_raw(data) and _close_raw().

Public API:
    class Link (context manager)
        send_frame(frame: bytes) -> None            adds CRC, COBS, delimiter; writes
        send_delimiter() -> None                    a lone 0x00: flushes the peer's deframer
        recv_frame(timeout_s: float) -> bytes | None    next valid frame (CRC removed), None on timeout
        close() -> None;  stats() -> dict[str, int];  url: str;  deframer: Deframer
        latency_timer_ms: int | None                USB-serial adapters only
    class SerialLink(Link)(ser, url)                any pyserial object (serial_for_url)
    class FdLink(Link)(fd, url, peer_path=None, keep_fds=())   a raw POSIX fd (pty ends)
    class AcceptLink(Link)(host="127.0.0.1", port=0, url=None)  accepts one peer at a time
        address -> (host, port);  connected: bool;  wait_connected(timeout_s) -> bool
    class VirtualCable (context manager): a pseudo-terminal pair in raw mode
        host_link() -> FdLink (master end);  controller_link() -> FdLink (slave end, in-process)
        slave_path: str  (e.g. /dev/pts/5, for a controller in a separate process)
    open_link(url, *, baud=921600, parity="N", write_timeout_s=0.1) -> Link
        URL forms: /dev/ttyUSB0, COM3, loop://, socket://127.0.0.1:5020, spy://..., rfc2217://...
                   (pyserial), pty:// (ours: master end, .peer_path names the slave),
                   accept://127.0.0.1:5020 (ours: listens and accepts one peer; binds 127.0.0.1
                   unless a host is given)
        bad URL, baud or parity -> LinkError("link 'URL': <key> <value>: <rule>")
    usb_latency_timer_ms(port_path, sysfs_root="/sys") -> int | None
    class LinkWarning(UserWarning)

Caution: a link carries firing commands for a real converter once the host drives hardware.
Never point a HIL session at a port wired to a live power stage.

Must never import numpy, numba or rtmodel.
"""

from __future__ import annotations

import errno
import os
import select
import socket
import time
import tty
import warnings
from urllib.parse import urlsplit

import serial

from host.errors import ConfigError, LinkError
from host.link.wire import MAX_PAYLOAD, Deframer, encode_wire

DEFAULT_BAUD = 921600
BAUD_MIN, BAUD_MAX = 50, 12_000_000
PARITIES = {
    "N": serial.PARITY_NONE, "NONE": serial.PARITY_NONE,
    "E": serial.PARITY_EVEN, "EVEN": serial.PARITY_EVEN,
    "O": serial.PARITY_ODD, "ODD": serial.PARITY_ODD,
}  # fmt: skip
PYSERIAL_SCHEMES = ("loop", "socket", "spy", "rfc2217", "hwgrep", "alt", "cp2110")
OUR_SCHEMES = ("pty", "accept")
# old spellings of our schemes: refused with a one-line "renamed to" error, never guessed
RENAMED_SCHEMES = {"tcp-listen": "accept"}
LATENCY_WARN_MS = 1


class LinkWarning(UserWarning):
    """Something about the link will hurt real-time behaviour but does not stop it."""


class Link:
    """A full-duplex frame pipe. Use as a context manager; close() is idempotent."""

    def __init__(self, url: str, max_payload: int = MAX_PAYLOAD):
        self.url = url
        self.deframer = Deframer(max_payload)
        self._pending: list[bytes] = []
        self.latency_timer_ms: int | None = None
        self.frames_sent = 0
        self.bytes_sent = 0
        self.bytes_received = 0
        self.closed = False

    # ---- public template ----------------------------------------------------------------------
    def send_frame(self, frame: bytes) -> None:
        data = encode_wire(frame)
        self._write_raw(data)
        self.frames_sent += 1
        self.bytes_sent += len(data)

    def send_delimiter(self) -> None:
        self._write_raw(b"\x00")
        self.bytes_sent += 1

    def recv_frame(self, timeout_s: float) -> bytes | None:
        """The next CRC-valid frame, or None when none completed before the deadline."""
        if self._pending:
            return self._pending.pop(0)
        deadline = time.perf_counter() + timeout_s
        remaining = timeout_s
        while True:
            chunk = self._read_raw(4096, remaining if remaining > 0.0 else 0.0)
            if chunk:
                self.bytes_received += len(chunk)
                frames = self.deframer.feed(chunk)
                if frames:
                    if len(frames) > 1:
                        self._pending.extend(frames[1:])
                    return frames[0]
            remaining = deadline - time.perf_counter()
            if remaining <= 0.0:
                return None

    def stats(self) -> dict[str, int]:
        s = self.deframer.stats()
        s.update(frames_sent=self.frames_sent, bytes_sent=self.bytes_sent, bytes_received=self.bytes_received)
        return s

    def close(self) -> None:
        if not self.closed:
            self.closed = True
            self._close_raw()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def __repr__(self) -> str:
        return f"{type(self).__name__}({self.url!r})"

    # ---- what subclasses implement -------------------------------------------------------------
    def _read_raw(self, max_bytes: int, timeout_s: float) -> bytes:
        raise NotImplementedError

    def _write_raw(self, data: bytes) -> None:
        raise NotImplementedError

    def _close_raw(self) -> None:
        raise NotImplementedError


class SerialLink(Link):
    """Any pyserial port object. Plain POSIX ports are read through select() on their fd,
    because changing pyserial's timeout reprograms the port on every call."""

    def __init__(self, ser, url: str, write_timeout_s: float = 0.1):
        super().__init__(url)
        self.ser = ser
        self._timeout = None
        self._write_timeout_s = write_timeout_s
        self._fd = None
        if type(ser) is getattr(serial, "Serial", None) and os.name == "posix":
            try:
                self._fd = ser.fileno()
            except Exception:  # noqa: BLE001 - any pyserial backend without a usable fd
                self._fd = None

    def _read_raw(self, max_bytes: int, timeout_s: float) -> bytes:
        try:
            if self._fd is not None:
                r, _, _ = select.select([self._fd], [], [], timeout_s)
                if not r:
                    return b""
                data = os.read(self._fd, max_bytes)
                if not data:
                    raise LinkError(f"link '{self.url}': the port reported end of file (device gone?)")
                return data
            if self._timeout != timeout_s:
                self.ser.timeout = timeout_s
                self._timeout = timeout_s
            data = self.ser.read(1)
            if data:
                n = self.ser.in_waiting
                if n:
                    data += self.ser.read(min(n, max_bytes - 1))
            return data
        except (serial.SerialException, OSError) as err:
            raise LinkError(f"link '{self.url}': read failed: {err}") from err

    def _write_raw(self, data: bytes) -> None:
        try:
            if self._fd is not None:
                _write_fd(self._fd, data, self._write_timeout_s, self.url)
            else:
                self.ser.write(data)
        except (serial.SerialException, OSError) as err:
            raise LinkError(f"link '{self.url}': write failed: {err}") from err

    def _close_raw(self) -> None:
        try:
            self.ser.close()
        except (serial.SerialException, OSError):
            pass


def _write_fd(fd: int, data: bytes, timeout_s: float, url: str) -> None:
    view = memoryview(data)
    deadline = None
    while view:
        try:
            n = os.write(fd, view)
            view = view[n:]
            continue
        except BlockingIOError:
            pass
        # the peer does not read: wait a little, then give up rather than stall the loop
        if deadline is None:
            deadline = time.perf_counter() + timeout_s
        remaining = deadline - time.perf_counter()
        if remaining <= 0:
            raise LinkError(f"link '{url}': write timed out after {timeout_s} s (is the other end reading?)")
        select.select([], [fd], [], remaining)


class FdLink(Link):
    """A raw POSIX file descriptor, e.g. one end of a pseudo-terminal. Owns fd (closes it)
    and any fds in keep_fds (held open only so the pty stays alive)."""

    def __init__(self, fd: int, url: str, peer_path: str | None = None, keep_fds=(), write_timeout_s=0.1):
        super().__init__(url)
        self.fd = fd
        self.peer_path = peer_path
        self._keep = list(keep_fds)
        self._write_timeout_s = write_timeout_s
        os.set_blocking(fd, False)

    def fileno(self) -> int:
        return self.fd

    def release_peer_hold(self) -> None:
        """Close the far-end handles held only to keep a pty alive until its peer opened it.
        Called once the peer has answered: from then on the peer's exit (or a killed peer
        process) closes the last far-end handle, and reads report it instead of waiting."""
        for fd in self._keep:
            try:
                os.close(fd)
            except OSError:
                pass
        self._keep = []

    def _read_raw(self, max_bytes: int, timeout_s: float) -> bytes:
        r, _, _ = select.select([self.fd], [], [], timeout_s)
        if not r:
            return b""
        try:
            data = os.read(self.fd, max_bytes)
        except BlockingIOError:
            return b""
        except OSError as err:
            if err.errno == errno.EIO:  # Linux pty master: every slave handle closed
                raise LinkError(f"link '{self.url}': the other end of the cable closed") from err
            raise LinkError(f"link '{self.url}': read failed: {err}") from err
        if not data:
            raise LinkError(f"link '{self.url}': the other end of the cable closed")
        return data

    def _write_raw(self, data: bytes) -> None:
        try:
            _write_fd(self.fd, data, self._write_timeout_s, self.url)
        except OSError as err:
            raise LinkError(f"link '{self.url}': write failed: {err}") from err

    def _close_raw(self) -> None:
        for fd in [self.fd, *self._keep]:
            try:
                os.close(fd)
            except OSError:
                pass


class VirtualCable:
    """A null-modem cable made of a pseudo-terminal pair, both ends in raw mode.

    The host takes host_link() (the master); a controller takes controller_link() in-process
    or opens slave_path from another process (pyserial, or the C example with termios raw).
    The cable holds its own slave handle while open so the master never sees EIO before the
    controller process has opened the path.
    """

    def __init__(self):
        if os.name != "posix":
            raise LinkError("link 'pty://': virtual cables need a POSIX system (pseudo-terminals)")
        self._master, self._slave = os.openpty()
        tty.setraw(self._slave)
        tty.setraw(self._master)
        self.slave_path = os.ttyname(self._slave)
        self._handed: set[str] = set()

    def host_link(self, hold_far_end: bool = False) -> FdLink:
        """The master end. hold_far_end: the link takes over the cable's own slave handle (the
        controller then runs in another process); link.release_peer_hold() drops it once the
        controller has answered, so that its death is seen as the cable closing."""
        self._take("host")
        link = FdLink(self._master, f"pty://{self.slave_path}#host", peer_path=self.slave_path)
        if hold_far_end:
            self._take("controller")
            link._keep.append(self._slave)
        return link

    def controller_link(self) -> FdLink:
        self._take("controller")
        return FdLink(self._slave, f"pty://{self.slave_path}#controller")

    def _take(self, end: str) -> None:
        if end in self._handed:
            raise LinkError(f"link 'pty://{self.slave_path}': the {end} end is already handed out")
        self._handed.add(end)

    def close(self) -> None:
        """Close the ends nobody took; taken ends belong to their links."""
        if "host" not in self._handed:
            self._close(self._master)
        if "controller" not in self._handed:
            self._close(self._slave)
        self._handed = {"host", "controller"}

    @staticmethod
    def _close(fd):
        try:
            os.close(fd)
        except OSError:
            pass

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


class AcceptLink(Link):
    """Listens on one TCP address and talks to one peer at a time, like a serial line: bytes
    written while no peer is connected are dropped (counted in bytes_dropped); when the peer
    disconnects the next one may connect."""

    def __init__(self, host: str = "127.0.0.1", port: int = 0, url: str | None = None, write_timeout_s=0.1):
        super().__init__(url or f"accept://{host}:{port}")
        self._write_timeout_s = write_timeout_s
        self._srv = socket.socket(socket.AF_INET6 if ":" in host else socket.AF_INET, socket.SOCK_STREAM)
        self._srv.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        try:
            self._srv.bind((host, port))
        except OSError as err:
            self._srv.close()
            raise LinkError(f"link '{self.url}': cannot listen: {err}") from err
        self._srv.listen(1)
        self._srv.setblocking(False)
        self._peer: socket.socket | None = None
        self.connects = 0
        self.bytes_dropped = 0

    @property
    def address(self) -> tuple[str, int]:
        return self._srv.getsockname()[:2]

    @property
    def connected(self) -> bool:
        return self._peer is not None

    def wait_connected(self, timeout_s: float) -> bool:
        if self._peer is None:
            self._accept(timeout_s)
        return self._peer is not None

    def _accept(self, timeout_s: float) -> None:
        r, _, _ = select.select([self._srv], [], [], timeout_s)
        if not r:
            return
        try:
            peer, _addr = self._srv.accept()
        except BlockingIOError:
            return
        peer.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)  # one frame per segment, now
        peer.setblocking(False)
        self._peer = peer
        self.connects += 1
        self.deframer.reset()

    def _drop_peer(self) -> None:
        if self._peer is not None:
            self._peer.close()
            self._peer = None
            self.deframer.reset()

    def _read_raw(self, max_bytes: int, timeout_s: float) -> bytes:
        if self._peer is None:
            t0 = time.perf_counter()
            self._accept(timeout_s)
            if self._peer is None:
                return b""
            timeout_s = max(0.0, timeout_s - (time.perf_counter() - t0))
        r, _, _ = select.select([self._peer], [], [], timeout_s)
        if not r:
            return b""
        try:
            data = self._peer.recv(max_bytes)
        except BlockingIOError:
            return b""
        except OSError:
            data = b""
        if not data:
            self._drop_peer()  # peer went away; a new one may connect
        return data

    def _write_raw(self, data: bytes) -> None:
        if self._peer is None:
            self._accept(0.0)
        if self._peer is None:
            self.bytes_dropped += len(data)
            return
        try:
            _write_fd(self._peer.fileno(), data, self._write_timeout_s, self.url)
        except OSError:
            self._drop_peer()
            self.bytes_dropped += len(data)

    def _close_raw(self) -> None:
        self._drop_peer()
        self._srv.close()


def usb_latency_timer_ms(port_path: str, sysfs_root: str = "/sys") -> int | None:
    """The latency timer of a USB-serial adapter (Linux sysfs), None when it cannot be read.
    USB-serial adapters with a latency timer hold received bytes up to this long before
    sending a USB packet."""
    try:
        name = os.path.basename(os.path.realpath(port_path))
        with open(f"{sysfs_root}/bus/usb-serial/devices/{name}/latency_timer", encoding="ascii") as fh:
            return int(fh.read().strip())
    except (OSError, ValueError):
        return None


def _check_baud(url: str, baud) -> int:
    if isinstance(baud, bool) or not isinstance(baud, int):
        try:
            if isinstance(baud, bool) or isinstance(baud, float):
                raise ValueError
            baud = int(str(baud).strip())
        except ValueError:
            raise LinkError(f"link '{url}': baud {baud!r}: must be a whole number of bit/s") from None
    if not BAUD_MIN <= baud <= BAUD_MAX:
        raise LinkError(f"link '{url}': baud {baud}: must be from {BAUD_MIN} to {BAUD_MAX} bit/s")
    return baud


def _check_parity(url: str, parity) -> str:
    key = str(parity).strip().upper()
    if key not in PARITIES:
        raise LinkError(f"link '{url}': parity {parity!r}: must be N, E or O (none, even, odd)")
    return PARITIES[key]


def _split_host_port(url: str, netloc: str, default_host: str) -> tuple[str, int]:
    try:
        parts = urlsplit("//" + netloc)
        port = parts.port
        host = parts.hostname or default_host
    except ValueError as err:
        raise LinkError(f"link '{url}': address {netloc!r}: {err}") from None
    if port is None:
        raise LinkError(f"link '{url}': address {netloc!r}: must name a port, e.g. 127.0.0.1:5020")
    return host, port


def open_link(url: str, *, baud: int = DEFAULT_BAUD, parity: str = "N", write_timeout_s: float = 0.1) -> Link:
    """Open a link from a URL string (see the module docstring for the forms)."""
    if not isinstance(url, str) or not url.strip():
        raise LinkError(f"link {url!r}: url: must be a port path or a URL such as loop:// or pty://")
    url = url.strip()
    scheme = url.split("://", 1)[0].lower() if "://" in url else ""
    if scheme == "pty":
        rest = url[len("pty://") :]
        if rest:
            raise LinkError(f"link '{url}': pty:// takes no path (the system picks the slave device)")
        cable = VirtualCable()
        link = cable.host_link()
        # the link keeps the slave handle so the master stays usable until a peer opens it
        cable._handed.add("controller")
        link._keep.append(cable._slave)
        link.url = f"pty://{cable.slave_path}"
        return link
    if scheme in RENAMED_SCHEMES:
        new_url = RENAMED_SCHEMES[scheme] + url[len(scheme):]
        raise ConfigError(f"--link: {scheme}://: renamed to {RENAMED_SCHEMES[scheme]}:// (use {new_url}), got '{url}'")
    if scheme == "accept":
        host, port = _split_host_port(url, url[len("accept://") :].split("/", 1)[0], "127.0.0.1")
        if host not in ("127.0.0.1", "::1", "localhost"):
            warnings.warn(
                f"link '{url}': listening on {host}, not loopback: anyone on that network can "
                "send firing commands to the model",
                LinkWarning,
                stacklevel=2,
            )
        return AcceptLink(host, port, url=url, write_timeout_s=write_timeout_s)
    if scheme and scheme not in PYSERIAL_SCHEMES:
        known = ", ".join(f"{s}://" for s in (*OUR_SCHEMES, *PYSERIAL_SCHEMES))
        raise LinkError(f"link '{url}': scheme {scheme!r}: unknown (known: {known}, or a port path)")
    if scheme in ("socket", "rfc2217"):
        # pyserial compares the port with a number and fails with a TypeError when there is none
        _split_host_port(url, url.split("://", 1)[1].split("/", 1)[0].split("?", 1)[0], "")
        host_part = urlsplit(url).hostname
        if not host_part:
            raise LinkError(f"link '{url}': address: must name a host and a port, e.g. {scheme}://127.0.0.1:5020")
    baud = _check_baud(url, baud)
    parity_code = _check_parity(url, parity)
    if not scheme and os.name == "posix" and not os.path.exists(url):
        raise LinkError(f"link '{url}': port: no such device")
    extra = {}
    if not scheme and os.name == "posix":
        # exclusive open (an advisory lock on the port): a second host on the same port fails
        # at once with one line instead of both reading half of the frames
        extra["exclusive"] = True
    try:
        ser = serial.serial_for_url(
            url, baudrate=baud, parity=parity_code, bytesize=serial.EIGHTBITS,
            stopbits=serial.STOPBITS_ONE, timeout=0, write_timeout=write_timeout_s, **extra,
        )  # fmt: skip
    except (serial.SerialException, ValueError, OSError) as err:
        raise LinkError(f"link '{url}': cannot open: {str(err).splitlines()[0] if str(err) else err!r}") from err
    link = SerialLink(ser, url, write_timeout_s=write_timeout_s)
    if not scheme:
        link.latency_timer_ms = usb_latency_timer_ms(url)
        if link.latency_timer_ms is not None and link.latency_timer_ms > LATENCY_WARN_MS:
            name = os.path.basename(os.path.realpath(url))
            warnings.warn(
                f"link '{url}': USB-serial latency timer is {link.latency_timer_ms} ms, frames will "
                f"arrive late; set it to 1 ms: echo 1 > /sys/bus/usb-serial/devices/{name}/latency_timer",
                LinkWarning,
                stacklevel=2,
            )
    return link
