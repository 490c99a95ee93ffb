"""A UDP relay in front of an SNMP agent that cuts every table walk short.

Requests pass through unchanged. Once ``cutting`` is set (after the device was
discovered), an answer longer than ``keep`` bytes (a GETBULK page of a table, not a
single GET) reaches the client cut to its first ``keep`` bytes, as when a walk's page
is lost half-way. Loopback only.
"""

from __future__ import annotations

import socket
import threading


class CutWalkRelay:
    def __init__(self, agent_port: int, keep: int = 120) -> None:
        self.agent = ("127.0.0.1", agent_port)
        self.keep = keep
        self.front = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
        self.front.bind(("127.0.0.1", 0))
        self.port = self.front.getsockname()[1]
        self.cut = 0  # answers cut so far
        self.cutting = False
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, name="cut-walk", daemon=True)

    def start(self) -> CutWalkRelay:
        self._thread.start()
        return self

    def _run(self) -> None:
        self.front.settimeout(0.2)
        back: dict[tuple[str, int], socket.socket] = {}
        while not self._stop.is_set():
            try:
                data, client = self.front.recvfrom(65535)
            except TimeoutError:
                continue
            except OSError:
                return
            sock = back.get(client)
            if sock is None:
                sock = back[client] = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
                sock.settimeout(2.0)
            sock.sendto(data, self.agent)
            try:
                answer, _ = sock.recvfrom(65535)
            except OSError:
                continue
            if self.cutting and len(answer) > self.keep:
                answer = answer[: self.keep]
                self.cut += 1
            self.front.sendto(answer, client)
        for sock in back.values():
            sock.close()

    def stop(self) -> None:
        self._stop.set()
        self._thread.join(timeout=5)
        self.front.close()
