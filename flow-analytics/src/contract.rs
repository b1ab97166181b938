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
pub const OUTCOME_DROPPED: &str = ipfix_core::ie::ForwardingOutcome::Dropped.name();

/// The `forwardingOutcome` and `forwardingReason` of a `forwardingStatus`
/// value, as `flowsift convert` derives them: ipfix-core's reading of the
/// IANA forwardingStatus registry (only the least-significant octet has a
/// meaning, IANA IE 89; RFC 7270 §4.12); `None` for codes the registry
/// leaves unassigned.
pub fn forwarding_names(status: u32) -> (&'static str, Option<&'static str>) {
    let status = ipfix_core::ie::ForwardingStatus(status);
    (status.outcome().name(), status.reason_name())
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
