"""Reaching a Dask scheduler: the address checked, the connection tried with a short timeout.

A scheduler address is ``tcp://HOST:PORT`` (``tls://`` for an encrypted
cluster; ``HOST:PORT`` alone means ``tcp://``; the port defaults to 8786).
Before the Dask client is made, :func:`probe_scheduler` opens a plain socket
with a timeout and, for ``tcp://``, reads the greeting a Dask scheduler sends
to every new connection: a refused port fails at once, a host that does not
answer fails after the timeout, and a port where another program listens (a
web server waits for a request and sends nothing) is named as such instead of
leaving the client waiting forever.  Every failure is one sentence.
"""

from __future__ import annotations

import re
import socket
from dataclasses import dataclass

from fractalseq.errors import ParameterError

__all__ = ["DEFAULT_CONNECT_TIMEOUT", "SchedulerAddress", "parse_address", "probe_scheduler"]

#: Seconds allowed for reaching a scheduler (``--connect-timeout``).
DEFAULT_CONNECT_TIMEOUT = 5.0
#: The port a Dask scheduler listens on unless told otherwise.
DEFAULT_PORT = 8786
_SCHEMES = ("tcp", "tls")
_ADDRESS = re.compile(
    r"^(?:(?P<scheme>[A-Za-z][A-Za-z0-9+.-]*)://)?"
    r"(?P<host>\[[0-9A-Fa-f:.]+\]|[A-Za-z0-9](?:[A-Za-z0-9.-]*[A-Za-z0-9])?)"
    r"(?::(?P<port>[0-9]{1,5}))?/?$"
)
#: Keys every Dask greeting holds (the handshake a scheduler writes first on a new connection).
_GREETING_MARK = b"pickle-protocol"


@dataclass(frozen=True)
class SchedulerAddress:
    """A checked scheduler address."""

    scheme: str
    host: str
    port: int

    @property
    def url(self) -> str:
        """``scheme://host:port`` as Dask takes it."""
        return f"{self.scheme}://{self.host}:{self.port}"


def parse_address(text: str) -> SchedulerAddress:
    """Check a scheduler address as typed; one sentence when it is not one.

    Raises
    ------
    ParameterError
        Not of the form ``tcp://HOST:PORT``, an unknown scheme or a port outside 1..65535.
    """
    example = "tcp://10.0.0.5:8786"
    m = _ADDRESS.match(str(text).strip())
    if not m:
        raise ParameterError(
            f"The scheduler address {str(text)!r} is not of the form tcp://HOST:PORT (e.g. {example}); check the address.",
            parameter="address",
        )
    scheme = (m.group("scheme") or "tcp").lower()
    if scheme not in _SCHEMES:
        raise ParameterError(
            f"The scheduler address {str(text)!r} uses the scheme {scheme}://, which fractalseq does not connect to; "
            f"use tcp:// or tls:// (e.g. {example}).",
            parameter="address",
        )
    port = int(m.group("port")) if m.group("port") else DEFAULT_PORT
    if not 1 <= port <= 65535:
        raise ParameterError(f"The scheduler port {port} is outside 1..65535; check the address (e.g. {example}).", parameter="address")
    return SchedulerAddress(scheme, m.group("host"), port)


def check_timeout(timeout: float) -> float:
    """The connection timeout in seconds: a positive, finite number."""
    try:
        value = float(timeout)
    except (TypeError, ValueError):
        raise ParameterError(f"The connection timeout must be a number of seconds, not {timeout!r}.", parameter="connect_timeout") from None
    if not 0 < value <= 3600:
        raise ParameterError(f"The connection timeout must lie between 0 and 3600 seconds, not {timeout!r}.", parameter="connect_timeout")
    return value


def probe_scheduler(address: SchedulerAddress, timeout: float = DEFAULT_CONNECT_TIMEOUT) -> None:
    """Make sure a Dask scheduler answers at ``address`` within ``timeout`` seconds.

    Raises
    ------
    ParameterError
        The host cannot be resolved, the port refuses or does not answer, or
        what answers is not a Dask scheduler.
    """
    timeout = check_timeout(timeout)
    host = address.host.strip("[]")
    where = address.url
    try:
        sock = socket.create_connection((host, address.port), timeout=timeout)
    except socket.gaierror:
        raise ParameterError(f"The scheduler host {address.host} cannot be resolved; check the address {where}.", parameter="address") from None
    except ConnectionRefusedError:
        raise ParameterError(
            f"Nothing listens at {where} (connection refused); start the scheduler (dask scheduler) or check the address.",
            parameter="address",
        ) from None
    except (socket.timeout, TimeoutError):
        raise ParameterError(
            f"The scheduler at {where} did not answer within {timeout:g} s; check the address and the firewall, "
            "or allow more time with a longer connection timeout.",
            parameter="address",
        ) from None
    except OSError as exc:
        raise ParameterError(f"Cannot reach the scheduler at {where} ({exc.strerror or exc}); check the address and the network.", parameter="address") from None
    with sock:
        if address.scheme != "tcp":
            return  # an encrypted greeting cannot be read without the certificates; the client checks it
        sock.settimeout(timeout)
        greeting = b""
        try:
            while len(greeting) < 4096 and _GREETING_MARK not in greeting:
                part = sock.recv(4096)
                if not part:
                    break
                greeting += part
        except (socket.timeout, TimeoutError):
            pass
        except OSError:
            greeting = b""
    if _GREETING_MARK not in greeting:
        raise ParameterError(
            f"Something listens at {where} but it is not a Dask scheduler (it sent no Dask greeting within {timeout:g} s); "
            "check the port; a Dask scheduler listens on 8786 unless told otherwise.",
            parameter="address",
        )
