"""Several links cleared together (a bench opened at once), over real loopback sockets."""

from __future__ import annotations

import time

import pytest

from drivers.errors import ConnectionLost
from drivers.transport import VisaTransport, clear_all


def _echo(loopback_server):
    return loopback_server(lambda line: b"ECHO " + line + b"\n" if line.endswith(b"?") else None)


def test_unread_answers_of_every_link_are_dropped(loopback_server):
    servers = [_echo(loopback_server) for _ in range(3)]
    links = [VisaTransport.open(s.resource, timeout_s=1.0, clear=False) for s in servers]
    try:
        for link in links:
            link.write("STALE?")  # an answer nobody reads
        time.sleep(0.1)
        clear_all(links)
        for index, link in enumerate(links):
            assert link.query(f"FRESH{index}?") == f"ECHO FRESH{index}?"
    finally:
        for link in links:
            link.close()


def test_a_peer_that_closed_is_named(loopback_server, closing_peer):
    good = VisaTransport.open(_echo(loopback_server).resource, timeout_s=1.0, clear=False)
    bad = VisaTransport.open(closing_peer, timeout_s=1.0, clear=False)
    try:
        with pytest.raises(ConnectionLost, match="closed the connection") as info:
            clear_all([good, bad])
        assert closing_peer in str(info.value)
    finally:
        good.close()
        bad.close()
