"""The connection to a server: the address with or without a scheme (as the CLI's --server),
TLS, the time allowed to connect, and the request id every call carries."""
import uuid
from typing import Optional, Tuple

import grpc

#: Time allowed to connect, in s, when none is given (as the CLI without --timeout).
CONNECT_TIMEOUT_S = 5.0
#: Default deadline of a unary call, in s: above the server's own default per-call limit (60 s),
#: so a call the server is still working on gets the server's answer rather than a client-side
#: timeout. Streams have none by default (a run streams for as long as it lasts).
CALL_TIMEOUT_S = 300.0
#: The metadata key of request ids, echoed by the server and written in its log lines.
REQUEST_ID = "x-request-id"
#: Largest message sent or received, in bytes.
MAX_MESSAGE_BYTES = 256 << 20


def parse_address(address: str, tls: bool) -> Tuple[str, bool]:
    """(grpc target "host:port", whether to use TLS) from `address` given as `host:port`,
    `http://host:port` or `https://host:port`: `https://` means TLS, and so does any address
    when `tls` (a CA certificate was given; `http://` is then upgraded), as the CLI's --server.

    Raises ValueError for another scheme or an empty address."""
    text = address.strip()
    scheme, sep, rest = text.partition("://")
    if not sep:
        scheme, rest = "", text
    scheme = scheme.lower()
    rest = rest.rstrip("/")
    if scheme not in ("", "http", "https"):
        raise ValueError(f"address {address!r}: the scheme {scheme}:// is not one jetloop speaks; give host:port, "
                         "http://host:port or https://host:port")
    if not rest:
        raise ValueError(f"address {address!r}: expected host:port, http://host:port or https://host:port")
    return rest, tls or scheme == "https"


def open_channel(target: str, use_tls: bool, connect_timeout_s: float, ca_pem: Optional[bytes] = None,
                 client_cert_pem: Optional[bytes] = None, client_key_pem: Optional[bytes] = None) -> grpc.Channel:
    """A channel to `target` that gives up connecting after `connect_timeout_s` (s); with TLS it
    trusts `ca_pem` (else the system's trusted roots) and presents the client certificate when
    given."""
    if not connect_timeout_s > 0:
        raise ValueError(f"connect_timeout_s = {connect_timeout_s!r}: expected seconds above 0")
    opts = [("grpc.max_send_message_length", MAX_MESSAGE_BYTES), ("grpc.max_receive_message_length", MAX_MESSAGE_BYTES),
            # grpc's connection attempt lasts at least this long (20 s by default): a host that
            # takes the connection and never answers, or drops the packets, fails after it.
            ("grpc.min_reconnect_backoff_ms", max(1, int(connect_timeout_s * 1000)))]
    if use_tls:
        creds = grpc.ssl_channel_credentials(root_certificates=ca_pem, private_key=client_key_pem,
                                             certificate_chain=client_cert_pem)
        return grpc.secure_channel(target, creds, options=opts)
    return grpc.insecure_channel(target, options=opts)


def new_request_id() -> str:
    """A new request id: 32 hexadecimal digits (the server keeps ids of 1 to 64 visible ASCII
    characters)."""
    return uuid.uuid4().hex
