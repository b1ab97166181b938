//! Abstract data types (RFC 7011 §6.1, RFC 7012 §3.1, RFC 6313 §4.5) and
//! data type semantics (RFC 7012 §3.2).

use std::fmt;

/// An IPFIX abstract data type, as listed in the IANA "IPFIX Information
/// Element Data Types" registry (RFC 7012 §3.1, RFC 6313, RFC 9740).
///
/// The discriminant is the IANA registry value.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "camelCase")]
#[repr(u8)]
pub enum DataType {
    /// Raw octets (RFC 7011 §6.1.6).
    OctetArray = 0,
    /// 1-octet unsigned integer (RFC 7011 §6.1.1).
    Unsigned8 = 1,
    /// 2-octet unsigned integer.
    Unsigned16 = 2,
    /// 4-octet unsigned integer.
    Unsigned32 = 3,
    /// 8-octet unsigned integer.
    Unsigned64 = 4,
    /// 1-octet two's complement integer.
    Signed8 = 5,
    /// 2-octet two's complement integer.
    Signed16 = 6,
    /// 4-octet two's complement integer.
    Signed32 = 7,
    /// 8-octet two's complement integer.
    Signed64 = 8,
    /// IEEE 754 binary32 (RFC 7011 §6.1.3).
    Float32 = 9,
    /// IEEE 754 binary64 (RFC 7011 §6.1.4); may be sent as 4 octets (§6.2).
    Float64 = 10,
    /// 1 = true, 2 = false (RFC 7011 §6.1.5).
    Boolean = 11,
    /// MAC-48 address (RFC 7011 §6.1.2).
    MacAddress = 12,
    /// UTF-8 string (RFC 7011 §6.1.6).
    String = 13,
    /// Seconds since the UNIX epoch, 4 octets (RFC 7011 §6.1.7).
    DateTimeSeconds = 14,
    /// Milliseconds since the UNIX epoch, 8 octets (RFC 7011 §6.1.8).
    DateTimeMilliseconds = 15,
    /// NTP timestamp, low 11 fraction bits ignored (RFC 7011 §6.1.9).
    DateTimeMicroseconds = 16,
    /// NTP timestamp (RFC 7011 §6.1.10).
    DateTimeNanoseconds = 17,
    /// IPv4 address (RFC 7011 §6.1.2).
    Ipv4Address = 18,
    /// IPv6 address (RFC 7011 §6.1.2).
    Ipv6Address = 19,
    /// basicList (RFC 6313 §4.5.1).
    BasicList = 20,
    /// subTemplateList (RFC 6313 §4.5.2).
    SubTemplateList = 21,
    /// subTemplateMultiList (RFC 6313 §4.5.3).
    SubTemplateMultiList = 22,
    /// 32-octet unsigned integer (IANA type 23, RFC 9740).
    Unsigned256 = 23,
}

impl DataType {
    /// All data types, in IANA registry order.
    pub const ALL: [DataType; 24] = [
        Self::OctetArray, Self::Unsigned8, Self::Unsigned16, Self::Unsigned32, Self::Unsigned64,
        Self::Signed8, Self::Signed16, Self::Signed32, Self::Signed64, Self::Float32, Self::Float64,
        Self::Boolean, Self::MacAddress, Self::String, Self::DateTimeSeconds,
        Self::DateTimeMilliseconds, Self::DateTimeMicroseconds, Self::DateTimeNanoseconds,
        Self::Ipv4Address, Self::Ipv6Address, Self::BasicList, Self::SubTemplateList,
        Self::SubTemplateMultiList, Self::Unsigned256,
    ];

    /// The registry name, e.g. `"unsigned32"`.
    pub const fn name(self) -> &'static str {
        match self {
            Self::OctetArray => "octetArray",
            Self::Unsigned8 => "unsigned8",
            Self::Unsigned16 => "unsigned16",
            Self::Unsigned32 => "unsigned32",
            Self::Unsigned64 => "unsigned64",
            Self::Signed8 => "signed8",
            Self::Signed16 => "signed16",
            Self::Signed32 => "signed32",
            Self::Signed64 => "signed64",
            Self::Float32 => "float32",
            Self::Float64 => "float64",
            Self::Boolean => "boolean",
            Self::MacAddress => "macAddress",
            Self::String => "string",
            Self::DateTimeSeconds => "dateTimeSeconds",
            Self::DateTimeMilliseconds => "dateTimeMilliseconds",
            Self::DateTimeMicroseconds => "dateTimeMicroseconds",
            Self::DateTimeNanoseconds => "dateTimeNanoseconds",
            Self::Ipv4Address => "ipv4Address",
            Self::Ipv6Address => "ipv6Address",
            Self::BasicList => "basicList",
            Self::SubTemplateList => "subTemplateList",
            Self::SubTemplateMultiList => "subTemplateMultiList",
            Self::Unsigned256 => "unsigned256",
        }
    }

    /// Looks a type up by its registry name (case-sensitive, as IANA writes it).
    pub fn from_name(name: &str) -> Option<Self> {
        Self::ALL.into_iter().find(|t| t.name() == name)
    }

    /// The full encoded size in octets for fixed-size types; `None` for
    /// octetArray, string and the list types, whose length is per template.
    pub const fn natural_length(self) -> Option<u16> {
        match self {
            Self::Unsigned8 | Self::Signed8 | Self::Boolean => Some(1),
            Self::Unsigned16 | Self::Signed16 => Some(2),
            Self::Unsigned32 | Self::Signed32 | Self::Float32 | Self::DateTimeSeconds
            | Self::Ipv4Address => Some(4),
            Self::Unsigned64 | Self::Signed64 | Self::Float64 | Self::DateTimeMilliseconds
            | Self::DateTimeMicroseconds | Self::DateTimeNanoseconds => Some(8),
            Self::MacAddress => Some(6),
            Self::Ipv6Address => Some(16),
            Self::Unsigned256 => Some(32),
            Self::OctetArray | Self::String | Self::BasicList | Self::SubTemplateList
            | Self::SubTemplateMultiList => None,
        }
    }

    /// Whether a field of this type may be sent in `len` octets on the wire.
    ///
    /// RFC 7011 §6.2: unsigned16/32/64 and signed16/32/64 may be reduced to
    /// any smaller whole number of octets; float64 only to 4 octets (float32);
    /// reduced-size encoding "MUST NOT be used" for other fixed-size types.
    /// Variable-length encoding (65535) is allowed for octetArray, string and
    /// the list types (RFC 7011 §7, RFC 6313 §5.1). unsigned256 (RFC 9740)
    /// is treated like the other unsigned types (from memory, unconfirmed).
    pub const fn accepts_length(self, len: u16) -> bool {
        match self {
            Self::OctetArray | Self::String | Self::BasicList | Self::SubTemplateList
            | Self::SubTemplateMultiList => true,
            Self::Unsigned8 | Self::Signed8 | Self::Boolean => len == 1,
            Self::Unsigned16 | Self::Signed16 => len >= 1 && len <= 2,
            Self::Unsigned32 | Self::Signed32 => len >= 1 && len <= 4,
            Self::Unsigned64 | Self::Signed64 => len >= 1 && len <= 8,
            Self::Unsigned256 => len >= 1 && len <= 32,
            Self::Float32 => len == 4,
            Self::Float64 => len == 4 || len == 8,
            Self::MacAddress => len == 6,
            Self::DateTimeSeconds | Self::Ipv4Address => len == 4,
            Self::DateTimeMilliseconds | Self::DateTimeMicroseconds
            | Self::DateTimeNanoseconds => len == 8,
            Self::Ipv6Address => len == 16,
        }
    }

    /// True for the RFC 6313 structured types.
    pub const fn is_list(self) -> bool {
        matches!(self, Self::BasicList | Self::SubTemplateList | Self::SubTemplateMultiList)
    }
}

impl fmt::Display for DataType {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

/// Data type semantics (RFC 7012 §3.2; IANA "IPFIX Information Element
/// Semantics" registry). The discriminant is the registry value.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "camelCase")]
#[repr(u8)]
pub enum Semantics {
    /// No semantics stated (value 0).
    Default = 0,
    /// A measured value for this record (RFC 7012 §3.2.1).
    Quantity = 1,
    /// Counter since the start of metering (RFC 7012 §3.2.2).
    TotalCounter = 2,
    /// Counter reset at each report (RFC 7012 §3.2.3).
    DeltaCounter = 3,
    /// Identifier; only equality is meaningful (RFC 7012 §3.2.4).
    Identifier = 4,
    /// Bit set (RFC 7012 §3.2.5).
    Flags = 5,
    /// Structured data list (RFC 6313 §4.2.1).
    List = 6,
    /// SNMP counter (RFC 8038).
    SnmpCounter = 7,
    /// SNMP gauge (RFC 8038).
    SnmpGauge = 8,
}

impl Semantics {
    /// The registry name, e.g. `"deltaCounter"`.
    pub const fn name(self) -> &'static str {
        match self {
            Self::Default => "default",
            Self::Quantity => "quantity",
            Self::TotalCounter => "totalCounter",
            Self::DeltaCounter => "deltaCounter",
            Self::Identifier => "identifier",
            Self::Flags => "flags",
            Self::List => "list",
            Self::SnmpCounter => "snmpCounter",
            Self::SnmpGauge => "snmpGauge",
        }
    }

    /// Looks semantics up by registry name.
    pub fn from_name(name: &str) -> Option<Self> {
        [
            Self::Default, Self::Quantity, Self::TotalCounter, Self::DeltaCounter,
            Self::Identifier, Self::Flags, Self::List, Self::SnmpCounter, Self::SnmpGauge,
        ]
        .into_iter()
        .find(|s| s.name() == name)
    }
}
