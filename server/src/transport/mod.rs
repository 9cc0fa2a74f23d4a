//! Transport: accepting connections without letting careless or hostile clients take the server down:
//! - **a cap on open connections**: at the cap a new connection takes the slot of the oldest
//!   connection that has not sent a byte yet (that one is closed), so a flood of silent
//!   connections cannot keep health checks and real calls out; when every connection has
//!   spoken, the new one is closed at once (a summary is logged once per interval);
//! - **a handshake timeout**: a connection that has sent no byte after it is closed, so bare
//!   TCP connections cannot hold slots;
//! - **back-off on accept errors** (e.g. the process is out of file descriptors): the accept
//!   loop waits and logs instead of spinning a core.
//!
//! HTTP/2 keepalive pings (set on the server builder) close connections whose peer is gone.

//!
//! - [`accept`]: the accept loop and the connection cap;
//! - [`conn`]: one connection (handshake timer, the switch that closes it, bytes written);
//! - [`send_watch`]: answers leaving a connection (permits let go in the write that takes the
//!   last byte out; late answers close the connection).

pub mod accept;
pub mod conn;
pub mod send_watch;

pub use accept::{
    default_max_connections, incoming, ConnectionLimits, Incoming, ACCEPT_BACKOFF, LOG_INTERVAL,
};
pub use conn::Conn;
pub use send_watch::{ConnInfo, ConnKill, ConnShared, OutOnDrop, Sending};
