"""No hang: a second host on the same port, a peer that stops reading, a TCP peer that
half-closes. Each ends in a LinkError or a clean disconnect, never in a blocked call.
Checked with bounded waits only (the project never asserts timings in tests; the
100 ms bounds are the write timeout of open_link and the receive deadlines)."""

from __future__ import annotations

import os
import socket

import pytest

from host.errors import LinkError
from host.link import AcceptLink, VirtualCable, open_link
from host.link.wire import encode_wire

pytestmark = pytest.mark.skipif(os.name != "posix", reason="pseudo-terminals and flock are POSIX")


def test_a_second_host_on_the_same_port_fails_cleanly():
    cable = VirtualCable()
    first = open_link(cable.slave_path)
    try:
        with pytest.raises(LinkError) as info:
            open_link(cable.slave_path)
        assert "exclusively lock" in str(info.value) and "\n" not in str(info.value)
    finally:
        first.close()
        cable.close()
    # once the first host closed the port, it can be opened again
    cable = VirtualCable()
    with open_link(cable.slave_path), pytest.raises(LinkError):
        open_link(cable.slave_path)
    cable.close()


def test_a_second_listener_on_the_same_address_fails_cleanly():
    with AcceptLink("127.0.0.1", 0) as first:
        with pytest.raises(LinkError, match="cannot listen"):
            AcceptLink("127.0.0.1", first.address[1])


def test_a_peer_that_stops_reading_gives_a_write_timeout_not_a_hang():
    cable = VirtualCable()
    link = cable.host_link()  # the slave end is held open but nobody reads it
    frame = encode_wire(b"\x13\x00\x00" + bytes(41))
    try:
        with pytest.raises(LinkError, match="write timed out"):
            for _ in range(100000):  # a pty buffers a few kB; then the write deadline passes
                link._write_raw(frame)
    finally:
        link.close()
        cable.close()


def test_a_tcp_peer_that_half_closes_is_dropped_and_a_new_one_accepted():
    with AcceptLink("127.0.0.1", 0) as link:
        c1 = socket.create_connection(link.address, timeout=5)
        assert link.wait_connected(5.0)
        c1.sendall(encode_wire(b"\x12\x00\x00" + bytes(14)))
        c1.shutdown(socket.SHUT_WR)  # half-close: no more bytes from the peer
        got = link.recv_frame(2.0)
        assert got is not None and got[0] == 0x12
        assert link.recv_frame(0.5) is None  # end of stream seen: the peer is dropped
        assert not link.connected
        c1.close()
        c2 = socket.create_connection(link.address, timeout=5)
        assert link.wait_connected(5.0) and link.connects == 2
        c2.close()
