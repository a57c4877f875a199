"""Outgoing requests to addresses an administrator typed in (webhooks): http(s) only, public addresses only.

A webhook address that leads to this machine or the site's own network would let
whoever sets it make the service call its neighbours (OWASP Server-Side Request
Forgery Prevention Cheat Sheet; see docs/references.md). So, unless the
administrator allows it, an address is refused when its host is, or resolves to,
a loopback, unspecified, link-local, multicast, reserved, private or otherwise
non-public address (Python's :mod:`ipaddress`, which encodes the IANA
special-purpose registries). The check runs twice: when the address is set
(:func:`host_problem`) and in the connection itself (:func:`opener`), which
resolves the name, checks every address it gets and connects only to a checked
one, so a name that changes its answer in between gains nothing. Redirects are
never followed and no proxy is used.
"""

from __future__ import annotations

import http.client
import ipaddress
import socket
import urllib.request
from functools import cache
from typing import Any

__all__ = ["RefusedAddress", "address_problem", "host_problem", "opener"]

IPAddress = ipaddress.IPv4Address | ipaddress.IPv6Address


class RefusedAddress(OSError):
    """A connection refused before it was made: the host is (or resolves to) a non-public address."""


def address_problem(address: IPAddress) -> str | None:
    """Why ``address`` is not one to send to (None when it is a public internet address)."""
    if isinstance(address, ipaddress.IPv6Address) and address.ipv4_mapped is not None:
        address = address.ipv4_mapped  # ::ffff:127.0.0.1 is 127.0.0.1
    if address.is_loopback:
        return "is a loopback address (this machine)"
    if address.is_unspecified:
        return "is the unspecified address"
    if address.is_link_local:
        return "is a link-local address"
    if address.is_multicast:
        return "is a multicast address"
    if address.is_reserved:
        return "is in a reserved range"
    if address.is_private:
        return "is in a private range"
    if not address.is_global:
        return "is not a public internet address"
    return None


def host_problem(host: str, port: int | None = None) -> str | None:
    """Why ``host`` may not be sent to: an address literal that is not public, or a name that resolves to one.

    A name that does not resolve now is not a problem here (the connection checks again when it is made).
    """
    try:
        literal = ipaddress.ip_address(host.strip("[]"))
    except ValueError:
        literal = None
    if literal is not None:
        problem = address_problem(literal)
        return f"{literal} {problem}" if problem else None
    try:
        addresses = _resolve(host, port or 443)
    except OSError:
        return None
    for address in addresses:
        if (problem := address_problem(address)) is not None:
            return f"{host} resolves to {address}, which {problem}"
    return None


def opener(*, allow_private: bool = False) -> urllib.request.OpenerDirector:
    """A urllib opener with no proxy and no redirects that, unless ``allow_private``, connects only to public addresses."""
    return _opener(bool(allow_private))


@cache
def _opener(allow_private: bool) -> urllib.request.OpenerDirector:
    handlers: list[Any] = [urllib.request.ProxyHandler({}), _NoRedirect()]
    if not allow_private:
        handlers += [_PublicHTTPHandler(), _PublicHTTPSHandler()]
    return urllib.request.build_opener(*handlers)


def _resolve(host: str, port: int) -> list[IPAddress]:
    """Every address ``host`` resolves to; OSError when it does not resolve (a failure worth retrying, not a refusal)."""
    try:
        infos = socket.getaddrinfo(host, port, type=socket.SOCK_STREAM)
    except UnicodeError as exc:
        raise OSError(f"{host} is not a valid host name: {exc}") from None
    seen: list[IPAddress] = []
    for _family, _type, _proto, _name, sockaddr in infos:
        address = ipaddress.ip_address(str(sockaddr[0]).split("%", 1)[0])
        if address not in seen:
            seen.append(address)
    return seen


def _public_connection(address: tuple[str, int], timeout: Any = socket._GLOBAL_DEFAULT_TIMEOUT, source_address: Any = None) -> socket.socket:  # type: ignore[attr-defined]
    """``socket.create_connection`` that resolves the host itself and connects only if every address it has is public."""
    host, port = address
    addresses = _resolve(host, port)
    for candidate in addresses:
        if (problem := address_problem(candidate)) is not None:
            raise RefusedAddress(f"{host} resolves to {candidate}, which {problem}")
    last: OSError | None = None
    for candidate in addresses:
        try:
            return socket.create_connection((str(candidate), port), timeout, source_address)
        except OSError as exc:
            last = exc
    raise last or OSError(f"{host} has no address")


class _PublicHTTPConnection(http.client.HTTPConnection):
    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        self._create_connection = _public_connection


class _PublicHTTPSConnection(http.client.HTTPSConnection):
    """TLS as usual (the certificate is checked against the host name); only the TCP connection is guarded."""

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        self._create_connection = _public_connection


class _PublicHTTPHandler(urllib.request.HTTPHandler):
    def do_open(self, http_class: Any, req: Any, **kwargs: Any) -> Any:
        return super().do_open(_PublicHTTPConnection, req, **kwargs)


class _PublicHTTPSHandler(urllib.request.HTTPSHandler):
    def do_open(self, http_class: Any, req: Any, **kwargs: Any) -> Any:
        return super().do_open(_PublicHTTPSConnection, req, **kwargs)


class _NoRedirect(urllib.request.HTTPRedirectHandler):
    """Answer a redirect as an error: a request goes only to the address the administrator set."""

    def redirect_request(self, *args: Any, **kwargs: Any) -> None:
        return None
