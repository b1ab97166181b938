//! The Parquet contract written by `flowsift convert`: column names and
//! types this crate reads.
//!
//! IANA Information Elements keep their registry names exactly; the
//! provenance and derived columns are flowsift's own. Every column may be
//! missing from a file or null in a row: a column that no input carries is
//! read as typed nulls, using the type listed here.

use polars::prelude::{DataType, TimeUnit, TimeZone};

/// `packetDeltaCount` (IANA IE 2).
pub const PACKET_DELTA_COUNT: &str = "packetDeltaCount";
/// `octetDeltaCount` (IANA IE 1).
pub const OCTET_DELTA_COUNT: &str = "octetDeltaCount";
/// `packetTotalCount` (IANA IE 86).
pub const PACKET_TOTAL_COUNT: &str = "packetTotalCount";
/// `octetTotalCount` (IANA IE 85).
pub const OCTET_TOTAL_COUNT: &str = "octetTotalCount";
/// `droppedPacketDeltaCount` (IANA IE 133).
pub const DROPPED_PACKET_DELTA_COUNT: &str = "droppedPacketDeltaCount";
/// `droppedOctetDeltaCount` (IANA IE 132).
pub const DROPPED_OCTET_DELTA_COUNT: &str = "droppedOctetDeltaCount";
/// `forwardingStatus` (IANA IE 89).
pub const FORWARDING_STATUS: &str = "forwardingStatus";
/// Derived: `unknown`, `forwarded`, `dropped` or `consumed`.
pub const FORWARDING_OUTCOME: &str = "forwardingOutcome";
/// Derived: registry reason in lower-case-hyphen form, e.g. `acl-deny`.
pub const FORWARDING_REASON: &str = "forwardingReason";
/// Derived: N of 1-in-N sampling, null when unknown.
pub const SAMPLING_RATE: &str = "samplingRate";
/// Derived: flow end, nanoseconds UTC.
pub const FLOW_END_TIME: &str = "flowEndTime";
/// Provenance: IPFIX Message export time, seconds UTC.
pub const EXPORT_TIME: &str = "exportTime";

/// The `forwardingOutcome` value that marks a whole record as dropped.
pub const OUTCOME_DROPPED: &str = "dropped";

/// Every assigned forwardingStatus code: (value of the least-significant
/// octet, reason). Source: IANA "Forwarding Status (Value 89)"
/// sub-registry, reasons 0x40–0x42, 0x80–0x8F and 0xC0–0xC3 also RFC 7270
/// §4.12 (0x89 is "bad TTL" per the registry and RFC 7270's table). Names
/// are the registry wording lower-cased with spaces replaced by hyphens,
/// as `flowsift convert` writes them.
const FORWARDING_REASONS: [(u8, &str); 25] = [
    (0x40, "unknown"),
    (0x41, "fragmented"),
    (0x42, "not-fragmented"),
    (0x43, "tunneled"),
    (0x44, "acl-redirect"),
    (0x80, "unknown"),
    (0x81, "acl-deny"),
    (0x82, "acl-drop"),
    (0x83, "unroutable"),
    (0x84, "adjacency"),
    (0x85, "fragmentation-and-df-set"),
    (0x86, "bad-header-checksum"),
    (0x87, "bad-total-length"),
    (0x88, "bad-header-length"),
    (0x89, "bad-ttl"),
    (0x8A, "policer"),
    (0x8B, "wred"),
    (0x8C, "rpf"),
    (0x8D, "for-us"),
    (0x8E, "bad-output-interface"),
    (0x8F, "hardware"),
    (0xC0, "unknown"),
    (0xC1, "punt-adjacency"),
    (0xC2, "incomplete-adjacency"),
    (0xC3, "for-us"),
];

/// The `forwardingOutcome` and `forwardingReason` of a `forwardingStatus`
/// value, as `flowsift convert` derives them: only the least-significant
/// octet has a meaning (IANA IE 89; RFC 7270 §4.12), its bits 7–6 are the
/// outcome (00b unknown, 01b forwarded, 10b dropped, 11b consumed) and the
/// whole octet names the reason; `None` for codes the registry leaves
/// unassigned.
pub fn forwarding_names(status: u32) -> (&'static str, Option<&'static str>) {
    let [octet, ..] = status.to_le_bytes();
    let outcome = match octet >> 6 {
        0 => "unknown",
        1 => "forwarded",
        2 => OUTCOME_DROPPED,
        _ => "consumed",
    };
    let reason = FORWARDING_REASONS
        .iter()
        .find(|(code, _)| *code == octet)
        .map(|(_, name)| *name);
    (outcome, reason)
}

/// The type of a contract column, or `None` for a name the contract does
/// not list.
pub fn dtype_of(column: &str) -> Option<DataType> {
    use DataType as D;
    let utc_ns = || D::Datetime(TimeUnit::Nanoseconds, Some(TimeZone::UTC));
    Some(match column {
        "packetDeltaCount" | "octetDeltaCount" | "packetTotalCount" | "octetTotalCount"
        | "droppedPacketDeltaCount" | "droppedOctetDeltaCount" => D::UInt64,
        "forwardingStatus"
        | "ingressInterface"
        | "egressInterface"
        | "bgpNextAdjacentAsNumber"
        | "bgpPrevAdjacentAsNumber"
        | "bgpSourceAsNumber"
        | "bgpDestinationAsNumber"
        | "ingressVRFID"
        | "egressVRFID"
        | "observationDomainId"
        | "samplingRate" => D::UInt32,
        "srhSegmentIPv6EndpointBehavior" | "templateId" => D::UInt16,
        "mplsTopLabelType" | "protocolIdentifier" => D::UInt8,
        "ipNextHopIPv4Address"
        | "ipNextHopIPv6Address"
        | "bgpNextHopIPv4Address"
        | "bgpNextHopIPv6Address"
        | "mplsTopLabelIPv4Address"
        | "srhActiveSegmentIPv6"
        | "sourceIPv4Address"
        | "destinationIPv4Address"
        | "sourceIPv6Address"
        | "destinationIPv6Address"
        | "exporter"
        | "forwardingOutcome"
        | "forwardingReason"
        | "ingressInterfaceName"
        | "egressInterfaceName"
        | "ingressVRFname"
        | "egressVRFname"
        | "srhEndpointBehaviorName" => D::String,
        "srhSegmentIPv6BasicList" => D::List(Box::new(D::String)),
        "mplsLabelStack" => D::List(Box::new(D::UInt32)),
        "flowStartTime" | "flowEndTime" => utc_ns(),
        // Polars has no seconds unit: Parquet Timestamp(s) is read as ms.
        "exportTime" => D::Datetime(TimeUnit::Milliseconds, Some(TimeZone::UTC)),
        _ => return None,
    })
}

/// The type used for record time (`flowEndTime`, else `exportTime`) and
/// for `bucketStart`.
pub fn time_dtype() -> DataType {
    DataType::Datetime(TimeUnit::Nanoseconds, Some(TimeZone::UTC))
}
