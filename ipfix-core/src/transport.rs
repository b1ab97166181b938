//! What only the transport knows: which Transport Session a message came on.

use std::fmt;
use std::net::SocketAddr;

/// The transport protocol an export arrived on (RFC 7011 §10).
///
/// It decides template rules: withdrawals are ignored over UDP (§8.4) and
/// honoured over TCP, SCTP and in files (§8.1; RFC 5655 §7.1).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Transport {
    /// UDP (RFC 7011 §10.3).
    Udp,
    /// TCP (RFC 7011 §10.4).
    Tcp,
    /// SCTP (RFC 7011 §10.2).
    Sctp,
    /// An IPFIX File (RFC 5655): one file is one Transport Session.
    File,
}

impl Transport {
    /// Lower-case name.
    pub const fn name(self) -> &'static str {
        match self {
            Self::Udp => "udp",
            Self::Tcp => "tcp",
            Self::Sctp => "sctp",
            Self::File => "file",
        }
    }
}

/// A Transport Session (RFC 7011 §2): exporter and collector endpoints plus
/// protocol. Templates are scoped by Transport Session and Observation Domain
/// (RFC 7011 §3.4.1, §8).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, serde::Serialize, serde::Deserialize)]
pub struct TransportSession {
    /// The exporter's address and port; `None` for an RFC 5655 file.
    pub exporter: Option<SocketAddr>,
    /// The collector's address and port; `None` for an RFC 5655 file.
    pub collector: Option<SocketAddr>,
    /// The transport protocol.
    pub transport: Transport,
    /// Distinguishes several files (or several TCP connections that reuse
    /// the same ports) that must not share template state.
    pub instance: u32,
}

impl TransportSession {
    /// A UDP session between `exporter` and `collector`.
    pub const fn udp(exporter: SocketAddr, collector: SocketAddr) -> Self {
        Self { exporter: Some(exporter), collector: Some(collector), transport: Transport::Udp, instance: 0 }
    }

    /// A TCP connection between `exporter` and `collector`.
    pub const fn tcp(exporter: SocketAddr, collector: SocketAddr) -> Self {
        Self { exporter: Some(exporter), collector: Some(collector), transport: Transport::Tcp, instance: 0 }
    }

    /// An RFC 5655 file; `instance` tells files apart.
    pub const fn file(instance: u32) -> Self {
        Self { exporter: None, collector: None, transport: Transport::File, instance }
    }
}

impl fmt::Display for TransportSession {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match (self.exporter, self.collector) {
            (Some(e), Some(c)) => write!(f, "{} {} -> {}", self.transport.name(), e, c),
            (Some(e), None) => write!(f, "{} {}", self.transport.name(), e),
            _ => write!(f, "{} #{}", self.transport.name(), self.instance),
        }
    }
}
