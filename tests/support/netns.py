"""A small network of hosts on this machine: Linux network namespaces joined by a bridge.

Each host is a namespace (``ip netns``) with one veth interface on a bridge that lives in a
namespace of its own; the test process reaches the hosts through one more veth pair from its own
namespace. Addresses come from 198.18.0.0/24 (RFC 2544's range for benchmarking tests), and all
traffic stays inside these namespaces and that one link. ``cut(host)`` takes the host's link to
the bridge down: its processes run on, but nothing they send arrives, and nothing reaches them.

Needs root (CAP_NET_ADMIN) and iproute2. :func:`unavailable` tells why a lab cannot be made.
"""

from __future__ import annotations

import os
import shutil
import signal
import subprocess
from collections.abc import Sequence
from pathlib import Path

SUBNET = "198.18.0"
CLIENT_ADDRESS = f"{SUBNET}.100"


def _ip(*args: str) -> None:
    subprocess.run(["ip", *args], check=True, capture_output=True, text=True, timeout=30)


def unavailable() -> str | None:
    """Why namespaces cannot be made here (None when they can): tried for real."""
    if shutil.which("ip") is None:
        return "iproute2's ip command is not installed"
    if os.geteuid() != 0:
        return "network namespaces need root (CAP_NET_ADMIN); this runs as uid " \
               f"{os.geteuid()}"
    probe = f"blst{os.getpid()}probe"
    try:
        _ip("netns", "add", probe)
        _ip("-n", probe, "link", "add", "br0", "type", "bridge")
    except subprocess.CalledProcessError as exc:
        return f"could not make a namespace and a bridge: {exc.stderr.strip()}"
    finally:
        subprocess.run(["ip", "netns", "del", probe], capture_output=True, timeout=30)
    return None


class NetLab:
    """Hosts named in ``hosts`` get ``198.18.0.1``, ``.2`` …; the test process is ``.100``."""

    def __init__(self, hosts: Sequence[str]) -> None:
        self.tag = f"b{os.getpid() % 100000}"
        self.hosts = list(hosts)
        self.address = {h: f"{SUBNET}.{i + 1}" for i, h in enumerate(self.hosts)}
        self.lan = f"{self.tag}-lan"
        self.processes: list[subprocess.Popen[bytes]] = []
        self.made: list[str] = []

    def namespace(self, host: str) -> str:
        return f"{self.tag}-{host}"

    def _port(self, index: int) -> str:
        return f"{self.tag}p{index}"  # the bridge side of a host's link (<= 15 characters)

    def __enter__(self) -> NetLab:
        try:
            _ip("netns", "add", self.lan)
            self.made.append(self.lan)
            _ip("-n", self.lan, "link", "add", "br0", "type", "bridge")
            _ip("-n", self.lan, "link", "set", "br0", "up")
            for index, host in enumerate(self.hosts):
                ns = self.namespace(host)
                _ip("netns", "add", ns)
                self.made.append(ns)
                _ip("-n", ns, "link", "set", "lo", "up")
                self._link(self._port(index), ns, f"{self.address[host]}/24")
            self._link(self._port(99), None, f"{CLIENT_ADDRESS}/24")
        except BaseException:
            self.__exit__(None, None, None)
            raise
        return self

    def _link(self, port: str, ns: str | None, address: str) -> None:
        """A veth pair: ``port`` on the bridge, its peer in ``ns`` (None: this namespace)."""
        host_end = f"{port}h"
        _ip("link", "add", host_end, "type", "veth", "peer", "name", port)
        _ip("link", "set", port, "netns", self.lan)
        _ip("-n", self.lan, "link", "set", port, "master", "br0")
        _ip("-n", self.lan, "link", "set", port, "up")
        if ns is None:
            _ip("addr", "add", address, "dev", host_end)
            _ip("link", "set", host_end, "up")
        else:
            _ip("link", "set", host_end, "netns", ns)
            _ip("-n", ns, "addr", "add", address, "dev", host_end)
            _ip("-n", ns, "link", "set", host_end, "up")

    def cut(self, host: str) -> None:
        """Take ``host``'s link down at the bridge: a host cut off the network."""
        _ip("-n", self.lan, "link", "set", self._port(self.hosts.index(host)), "down")

    def start(self, host: str, argv: Sequence[str], env: dict[str, str], log: Path
              ) -> subprocess.Popen[bytes]:
        """``argv`` on ``host``, in a process group of its own, output to ``log``."""
        with log.open("ab") as out:
            process = subprocess.Popen(["ip", "netns", "exec", self.namespace(host), *argv],
                                       env=env, stdout=out, stderr=subprocess.STDOUT,
                                       stdin=subprocess.DEVNULL, start_new_session=True)
        self.processes.append(process)
        return process

    def __exit__(self, *exc: object) -> None:
        for process in reversed(self.processes):
            if process.poll() is None:
                try:
                    os.killpg(process.pid, signal.SIGKILL)
                except ProcessLookupError:
                    pass
            process.wait(timeout=30)
        self.processes.clear()
        for ns in reversed(self.made):  # the bridge's namespace last: it takes the veth pairs
            subprocess.run(["ip", "netns", "del", ns], capture_output=True, timeout=30)
        self.made.clear()
        # the test process's end of its link goes with its peer; make sure of it
        subprocess.run(["ip", "link", "del", f"{self._port(99)}h"], capture_output=True,
                       timeout=30)
