"""Webhook URL safety: which addresses a delivery may reach, checked per attempt.

:func:`check_url` parses the URL, resolves its host once and judges every
address it resolves to. It returns a :class:`CheckedUrl` holding those
addresses; the delivery connects to one of them (the connection is pinned:
the host is not resolved a second time), so a DNS answer that changes
between the check and the connection cannot steer a delivery to an address
that was never checked.

An IPv6 address can carry an IPv4 address inside it; such an address is
judged by the IPv4 address it wraps:

- IPv4-mapped ``::ffff:a.b.c.d`` and IPv4-compatible ``::a.b.c.d``;
- 6to4 ``2002:AABB:CCDD::/48`` (RFC 3056);
- Teredo ``2001:0::/32`` (RFC 4380): both the server and the client address;
- NAT64 ``64:ff9b::/96`` (RFC 6052); the local-use NAT64 prefix
  ``64:ff9b:1::/48`` (RFC 8215) leads into a private network and is refused.

Refused: loopback, private, shared (carrier-grade NAT), link-local,
multicast, unspecified and reserved addresses, any address that is not
globally reachable, and port 0. With ``allow_loopback`` (a setting for
local use and tests) a URL whose host resolves only to loopback addresses
is accepted, over ``http`` too.
"""

from __future__ import annotations

import ipaddress
import socket
from collections.abc import Callable
from dataclasses import dataclass
from urllib.parse import urlsplit

from .errors import UnsafeWebhookUrl

__all__ = [
    "Resolver", "CheckedUrl", "check_url", "embedded_ipv4", "refusal_reason", "refused_form"]

Resolver = Callable[[str, int], list[str]]

IPAddress = ipaddress.IPv4Address | ipaddress.IPv6Address

_NAT64 = ipaddress.IPv6Network("64:ff9b::/96")
_NAT64_LOCAL = ipaddress.IPv6Network("64:ff9b:1::/48")
_COMPATIBLE = ipaddress.IPv6Network("::/96")
_SHARED = ipaddress.IPv4Network("100.64.0.0/10")
#: RFC 1918 private networks and IPv6 unique local addresses (RFC 4193).
_PRIVATE = tuple(
    ipaddress.ip_network(n) for n in ("10.0.0.0/8", "172.16.0.0/12", "192.168.0.0/16", "fc00::/7")
)


@dataclass(frozen=True)
class CheckedUrl:
    """A URL that passed the check, with the addresses its host resolved to (in order)."""

    url: str
    scheme: str
    host: str
    port: int
    addresses: tuple[str, ...]


def _resolve(host: str, port: int) -> list[str]:
    infos = socket.getaddrinfo(host, port, type=socket.SOCK_STREAM)
    seen: dict[str, None] = {}
    for info in infos:
        seen.setdefault(str(info[4][0]), None)
    return list(seen)


def embedded_ipv4(ip: IPAddress) -> tuple[str, list[ipaddress.IPv4Address]] | None:
    """The IPv4 addresses an IPv6 address wraps, and the name of the form; None when none."""
    if isinstance(ip, ipaddress.IPv4Address):
        return None
    if ip.ipv4_mapped is not None:
        return "an IPv4-mapped address", [ip.ipv4_mapped]
    if ip.sixtofour is not None:
        return "a 6to4 address", [ip.sixtofour]
    if ip.teredo is not None:
        server, client = ip.teredo
        return "a Teredo address", [client, server]
    if ip in _NAT64:
        return "a NAT64 address", [ipaddress.IPv4Address(int(ip) & 0xFFFFFFFF)]
    if ip in _COMPATIBLE and int(ip) > 1:  # not :: (unspecified) nor ::1 (loopback)
        return "an IPv4-compatible address", [ipaddress.IPv4Address(int(ip) & 0xFFFFFFFF)]
    return None


def _plain_reason(ip: IPAddress) -> str | None:
    """Why one address (no unwrapping) may not be reached; None when it is public."""
    if ip.is_loopback:
        return "a loopback address"
    if ip.is_unspecified:
        return "the unspecified address"
    if ip.is_link_local:
        return "a link-local address"
    if ip.is_multicast:
        return "a multicast address"
    if isinstance(ip, ipaddress.IPv4Address) and ip in _SHARED:
        return "a shared (carrier-grade NAT) address"
    if isinstance(ip, ipaddress.IPv6Address) and ip in _NAT64_LOCAL:
        return "a local-use NAT64 address, which leads into a private network"
    if any(ip in net for net in _PRIVATE if net.version == ip.version):
        return "a private address"
    if ip.is_reserved:
        return "a reserved address"
    if not ip.is_global:  # documentation, benchmarking, protocol assignments and the like
        return "a special-purpose address that is not globally reachable"
    return None


def refusal_reason(ip: IPAddress) -> str | None:
    """Why a delivery may not go to ``ip`` (wrapped IPv4 addresses unwrapped); None when it may."""
    wrapped = embedded_ipv4(ip)
    if wrapped is None:
        return _plain_reason(ip)
    form, inner = wrapped
    for v4 in inner:
        why = _plain_reason(v4)
        if why is not None:
            return f"{form} wrapping {v4} ({why})"
    if form == "a Teredo address":  # 2001::/32 itself is not globally reachable (IANA registry)
        return "a Teredo address (2001::/32), which is not globally reachable"
    return None


def _is_loopback(ip: IPAddress) -> bool:
    wrapped = embedded_ipv4(ip)
    if wrapped is not None and wrapped[0] in ("an IPv4-mapped address", "an IPv4-compatible address"):
        return all(v4.is_loopback for v4 in wrapped[1])
    return ip.is_loopback


def refused_form(url: str) -> UnsafeWebhookUrl | None:
    """The refusal for a URL that names port 0 or an IPv6 address literal (None for other URLs).

    Webhook URLs name their host by a domain name, whose addresses are checked when it
    resolves; an IPv6 literal is refused, with why when it wraps a refused IPv4 address.
    """
    try:
        parts = urlsplit(url)
        port = parts.port
    except ValueError:
        return None
    if port == 0:
        return UnsafeWebhookUrl("port 0 cannot be connected to; name a port from 1 to 65535", field="url")
    host = parts.hostname or ""
    if ":" not in host:
        return None
    try:
        ip = ipaddress.ip_address(host.split("%", 1)[0])
    except ValueError:
        return None
    why = refusal_reason(ip)
    if why is not None:
        return UnsafeWebhookUrl(f"{ip} is {why}; webhooks may only reach public addresses", field="url",
                                address=str(ip))
    return UnsafeWebhookUrl(f"{ip} is an IPv6 address; name the receiver's host by its domain name "
                            "(its addresses are checked when it resolves)", field="url", address=str(ip))


def check_url(url: str, *, allow_loopback: bool = False, resolve: Resolver | None = None) -> CheckedUrl:
    """Refuse a URL that is not https, names port 0, or resolves to any non-public address.

    Raises :class:`UnsafeWebhookUrl` whose reason names the refused address
    and why; returns the checked addresses otherwise.
    """
    try:
        parts = urlsplit(url)
        port = parts.port
    except ValueError as exc:
        raise UnsafeWebhookUrl(f"the URL cannot be parsed ({exc})", field="url") from exc
    host = parts.hostname
    if parts.scheme not in ("https", "http") or not host:
        raise UnsafeWebhookUrl("webhook URLs must be absolute https URLs", field="url")
    if parts.username or parts.password:
        raise UnsafeWebhookUrl("webhook URLs must not carry credentials", field="url")
    if port == 0:
        raise UnsafeWebhookUrl("port 0 cannot be connected to; name a port from 1 to 65535", field="url")
    port = port or (443 if parts.scheme == "https" else 80)
    try:
        addresses = (resolve or _resolve)(host, port)
    except (OSError, UnicodeError) as exc:
        raise UnsafeWebhookUrl(f"the host {host!r} does not resolve", field="url") from exc
    if not addresses:
        raise UnsafeWebhookUrl(f"the host {host!r} does not resolve", field="url")
    ips: list[IPAddress] = [ipaddress.ip_address(a.split("%", 1)[0]) for a in addresses]
    checked = CheckedUrl(url=url, scheme=parts.scheme, host=host, port=port, addresses=tuple(str(ip) for ip in ips))
    if allow_loopback and all(_is_loopback(ip) for ip in ips):
        return checked
    for ip in ips:
        why = refusal_reason(ip)
        if why is not None:
            said = f"{ip} is {why}" if host == str(ip) else f"the host {host!r} resolves to {ip}, which is {why}"
            raise UnsafeWebhookUrl(
                f"{said}; webhooks may only reach public addresses",
                field="url",
                address=str(ip),
            )
    if parts.scheme != "https":
        raise UnsafeWebhookUrl("webhook URLs must use https", field="url")
    return checked
