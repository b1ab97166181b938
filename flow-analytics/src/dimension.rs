//! What drops are grouped by: short names for the common questions, or any
//! column by its name.

use std::fmt;
use std::str::FromStr;

use polars::prelude::{coalesce, col, Expr};

use crate::error::Error;

/// One grouping dimension of a drop query.
///
/// Each named variant has a short name (see [`Dimension::short_name`]) and
/// reads the columns listed by [`Dimension::reads`]. Any other name is a
/// column of the input, used as it is ([`Dimension::Column`]).
///
/// | short name | groups by | columns read |
/// |---|---|---|
/// | `next-hop` | IP next hop, v4 or v6 (output column `nextHop`) | `ipNextHopIPv4Address`, `ipNextHopIPv6Address` |
/// | `bgp-next-hop` | BGP next hop, v4 or v6 (output column `bgpNextHop`) | `bgpNextHopIPv4Address`, `bgpNextHopIPv6Address` |
/// | `in-if` | ingress interface id, name beside | `ingressInterface`, `ingressInterfaceName` |
/// | `out-if` | egress interface id, name beside | `egressInterface`, `egressInterfaceName` |
/// | `labels` | the whole MPLS label stack | `mplsLabelStack` |
/// | `top-label` | top MPLS label value (output `topLabel`) and its type | `mplsLabelStack`, `mplsTopLabelType` |
/// | `segment` | SRv6 active segment | `srhActiveSegmentIPv6` |
/// | `segments` | SRv6 segment list | `srhSegmentIPv6BasicList` |
/// | `behavior` | SRv6 endpoint behavior, by name | `srhEndpointBehaviorName` |
/// | `peer-as` | next adjacent AS | `bgpNextAdjacentAsNumber` |
/// | `prev-as` | previous adjacent AS | `bgpPrevAdjacentAsNumber` |
/// | `src-as` | source AS | `bgpSourceAsNumber` |
/// | `dst-as` | destination AS | `bgpDestinationAsNumber` |
/// | `in-vrf` | ingress VRF id, name beside | `ingressVRFID`, `ingressVRFname` |
/// | `out-vrf` | egress VRF id, name beside | `egressVRFID`, `egressVRFname` |
/// | `exporter` | exporting device | `exporter` |
/// | `reason` | forwarding reason | `forwardingReason` |
/// | `outcome` | forwarding outcome | `forwardingOutcome` |
/// | `domain` | observation domain | `observationDomainId` |
///
/// Interfaces and VRFs are grouped by id; the name shown beside is the
/// first non-null name seen for that id, in input order among the records
/// the query keeps, the same in every row that shows the id.
#[derive(Debug, Clone, PartialEq, Eq, Hash)]
#[non_exhaustive]
pub enum Dimension {
    /// `next-hop`: IP next hop, IPv4 or IPv6.
    NextHop,
    /// `bgp-next-hop`: BGP next hop, IPv4 or IPv6.
    BgpNextHop,
    /// `in-if`: ingress interface.
    IngressInterface,
    /// `out-if`: egress interface.
    EgressInterface,
    /// `labels`: the whole MPLS label stack.
    LabelStack,
    /// `top-label`: the top MPLS label and its type.
    TopLabel,
    /// `segment`: the SRv6 active segment.
    ActiveSegment,
    /// `segments`: the SRv6 segment list.
    SegmentList,
    /// `behavior`: the SRv6 endpoint behavior name.
    EndpointBehavior,
    /// `peer-as`: the next adjacent AS.
    PeerAs,
    /// `prev-as`: the previous adjacent AS.
    PreviousAs,
    /// `src-as`: the source AS.
    SourceAs,
    /// `dst-as`: the destination AS.
    DestinationAs,
    /// `in-vrf`: the ingress VRF.
    IngressVrf,
    /// `out-vrf`: the egress VRF.
    EgressVrf,
    /// `exporter`: the exporting device.
    Exporter,
    /// `reason`: the forwarding reason.
    Reason,
    /// `outcome`: the forwarding outcome.
    Outcome,
    /// `domain`: the observation domain id.
    ObservationDomain,
    /// Any input column, by its exact name.
    Column(String),
}

/// How a key is shown in the human table.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Style {
    /// The value as text.
    Plain,
    /// An id with the name column (second column) beside it.
    IdWithName,
    /// MPLS labels joined with `/`, top first.
    LabelStack,
    /// SRv6 segments in path order joined with arrows.
    SegmentPath,
    /// A label value with its type (second column) beside it.
    LabelWithType,
}

/// What a dimension adds to the query: group keys, the columns that travel
/// with them, and how the table shows them.
#[derive(Debug, Clone)]
pub(crate) struct DimensionPlan {
    /// Table heading.
    pub heading: String,
    /// Output columns grouped on, with the expressions that compute them.
    pub keys: Vec<(String, Expr)>,
    /// Output columns shown beside the first key, not grouped on: the
    /// first non-null per id (drops looks them up for the groups it shows;
    /// `compare` carries them, first non-null per group).
    pub companions: Vec<String>,
    /// Input columns read.
    pub reads: Vec<String>,
    /// Table rendering.
    pub style: Style,
}

impl Dimension {
    /// Every named dimension, in documentation order.
    pub const NAMED: [Dimension; 19] = [
        Dimension::NextHop,
        Dimension::BgpNextHop,
        Dimension::IngressInterface,
        Dimension::EgressInterface,
        Dimension::LabelStack,
        Dimension::TopLabel,
        Dimension::ActiveSegment,
        Dimension::SegmentList,
        Dimension::EndpointBehavior,
        Dimension::PeerAs,
        Dimension::PreviousAs,
        Dimension::SourceAs,
        Dimension::DestinationAs,
        Dimension::IngressVrf,
        Dimension::EgressVrf,
        Dimension::Exporter,
        Dimension::Reason,
        Dimension::Outcome,
        Dimension::ObservationDomain,
    ];

    /// The short name, or `None` for [`Dimension::Column`].
    pub fn short_name(&self) -> Option<&'static str> {
        Some(match self {
            Dimension::NextHop => "next-hop",
            Dimension::BgpNextHop => "bgp-next-hop",
            Dimension::IngressInterface => "in-if",
            Dimension::EgressInterface => "out-if",
            Dimension::LabelStack => "labels",
            Dimension::TopLabel => "top-label",
            Dimension::ActiveSegment => "segment",
            Dimension::SegmentList => "segments",
            Dimension::EndpointBehavior => "behavior",
            Dimension::PeerAs => "peer-as",
            Dimension::PreviousAs => "prev-as",
            Dimension::SourceAs => "src-as",
            Dimension::DestinationAs => "dst-as",
            Dimension::IngressVrf => "in-vrf",
            Dimension::EgressVrf => "out-vrf",
            Dimension::Exporter => "exporter",
            Dimension::Reason => "reason",
            Dimension::Outcome => "outcome",
            Dimension::ObservationDomain => "domain",
            Dimension::Column(_) => return None,
        })
    }

    /// One line saying what the dimension groups by.
    pub fn description(&self) -> &'static str {
        match self {
            Dimension::NextHop => "IP next hop (IPv4 or IPv6)",
            Dimension::BgpNextHop => "BGP next hop (IPv4 or IPv6)",
            Dimension::IngressInterface => "ingress interface id, with its name",
            Dimension::EgressInterface => "egress interface id, with its name",
            Dimension::LabelStack => "whole MPLS label stack, top label first",
            Dimension::TopLabel => "top MPLS label and its label type",
            Dimension::ActiveSegment => "SRv6 active segment",
            Dimension::SegmentList => "SRv6 segment list",
            Dimension::EndpointBehavior => "SRv6 endpoint behavior, by name",
            Dimension::PeerAs => "next adjacent (peer) AS",
            Dimension::PreviousAs => "previous adjacent AS",
            Dimension::SourceAs => "source AS",
            Dimension::DestinationAs => "destination AS",
            Dimension::IngressVrf => "ingress VRF id, with its name",
            Dimension::EgressVrf => "egress VRF id, with its name",
            Dimension::Exporter => "exporting device",
            Dimension::Reason => "forwarding reason",
            Dimension::Outcome => "forwarding outcome",
            Dimension::ObservationDomain => "observation domain id",
            Dimension::Column(_) => "an input column, by its exact name",
        }
    }

    /// The input columns this dimension reads.
    pub fn reads(&self) -> Vec<&str> {
        match self {
            Dimension::NextHop => vec!["ipNextHopIPv4Address", "ipNextHopIPv6Address"],
            Dimension::BgpNextHop => vec!["bgpNextHopIPv4Address", "bgpNextHopIPv6Address"],
            Dimension::IngressInterface => vec!["ingressInterface", "ingressInterfaceName"],
            Dimension::EgressInterface => vec!["egressInterface", "egressInterfaceName"],
            Dimension::LabelStack => vec!["mplsLabelStack"],
            Dimension::TopLabel => vec!["mplsLabelStack", "mplsTopLabelType"],
            Dimension::ActiveSegment => vec!["srhActiveSegmentIPv6"],
            Dimension::SegmentList => vec!["srhSegmentIPv6BasicList"],
            Dimension::EndpointBehavior => vec!["srhEndpointBehaviorName"],
            Dimension::PeerAs => vec!["bgpNextAdjacentAsNumber"],
            Dimension::PreviousAs => vec!["bgpPrevAdjacentAsNumber"],
            Dimension::SourceAs => vec!["bgpSourceAsNumber"],
            Dimension::DestinationAs => vec!["bgpDestinationAsNumber"],
            Dimension::IngressVrf => vec!["ingressVRFID", "ingressVRFname"],
            Dimension::EgressVrf => vec!["egressVRFID", "egressVRFname"],
            Dimension::Exporter => vec!["exporter"],
            Dimension::Reason => vec!["forwardingReason"],
            Dimension::Outcome => vec!["forwardingOutcome"],
            Dimension::ObservationDomain => vec!["observationDomainId"],
            Dimension::Column(name) => vec![name.as_str()],
        }
    }

    /// The query pieces for this dimension.
    pub(crate) fn plan(&self) -> DimensionPlan {
        let plain = |heading: &str, column: &str| DimensionPlan {
            heading: heading.to_string(),
            keys: vec![(column.to_string(), col(column))],
            companions: Vec::new(),
            reads: vec![column.to_string()],
            style: Style::Plain,
        };
        let either = |heading: &str, out: &str, v4: &str, v6: &str| DimensionPlan {
            heading: heading.to_string(),
            keys: vec![(out.to_string(), coalesce(&[col(v4), col(v6)]).alias(out))],
            companions: Vec::new(),
            reads: vec![v4.to_string(), v6.to_string()],
            style: Style::Plain,
        };
        let named = |heading: &str, id: &str, name: &str| DimensionPlan {
            heading: heading.to_string(),
            keys: vec![(id.to_string(), col(id))],
            companions: vec![name.to_string()],
            reads: vec![id.to_string(), name.to_string()],
            style: Style::IdWithName,
        };
        match self {
            Dimension::NextHop => either(
                "next hop",
                "nextHop",
                "ipNextHopIPv4Address",
                "ipNextHopIPv6Address",
            ),
            Dimension::BgpNextHop => either(
                "BGP next hop",
                "bgpNextHop",
                "bgpNextHopIPv4Address",
                "bgpNextHopIPv6Address",
            ),
            Dimension::IngressInterface => {
                named("in interface", "ingressInterface", "ingressInterfaceName")
            }
            Dimension::EgressInterface => {
                named("out interface", "egressInterface", "egressInterfaceName")
            }
            Dimension::LabelStack => DimensionPlan {
                style: Style::LabelStack,
                ..plain("label stack", "mplsLabelStack")
            },
            Dimension::TopLabel => DimensionPlan {
                heading: "top label".to_string(),
                keys: vec![
                    (
                        "topLabel".to_string(),
                        col("mplsLabelStack").list().first().alias("topLabel"),
                    ),
                    ("mplsTopLabelType".to_string(), col("mplsTopLabelType")),
                ],
                companions: Vec::new(),
                reads: vec!["mplsLabelStack".to_string(), "mplsTopLabelType".to_string()],
                style: Style::LabelWithType,
            },
            Dimension::ActiveSegment => plain("active segment", "srhActiveSegmentIPv6"),
            Dimension::SegmentList => DimensionPlan {
                style: Style::SegmentPath,
                ..plain("segment path", "srhSegmentIPv6BasicList")
            },
            Dimension::EndpointBehavior => plain("behavior", "srhEndpointBehaviorName"),
            Dimension::PeerAs => plain("peer AS", "bgpNextAdjacentAsNumber"),
            Dimension::PreviousAs => plain("prev AS", "bgpPrevAdjacentAsNumber"),
            Dimension::SourceAs => plain("source AS", "bgpSourceAsNumber"),
            Dimension::DestinationAs => plain("dest AS", "bgpDestinationAsNumber"),
            Dimension::IngressVrf => named("in VRF", "ingressVRFID", "ingressVRFname"),
            Dimension::EgressVrf => named("out VRF", "egressVRFID", "egressVRFname"),
            Dimension::Exporter => plain("exporter", "exporter"),
            Dimension::Reason => plain("reason", "forwardingReason"),
            Dimension::Outcome => plain("outcome", "forwardingOutcome"),
            Dimension::ObservationDomain => plain("domain", "observationDomainId"),
            Dimension::Column(name) => {
                let style = match name.as_str() {
                    "mplsLabelStack" => Style::LabelStack,
                    "srhSegmentIPv6BasicList" => Style::SegmentPath,
                    _ => Style::Plain,
                };
                DimensionPlan {
                    style,
                    ..plain(name, name)
                }
            }
        }
    }

    /// Parses a comma-separated list such as `next-hop,reason`.
    ///
    /// # Errors
    /// An empty item, or a dimension named twice.
    pub fn parse_list(text: &str) -> Result<Vec<Dimension>, Error> {
        let mut out: Vec<Dimension> = Vec::new();
        for item in text.split(',') {
            let dim: Dimension = item.parse()?;
            if out.contains(&dim) {
                return Err(Error::DuplicateDimension {
                    name: item.trim().to_string(),
                });
            }
            out.push(dim);
        }
        Ok(out)
    }
}

impl FromStr for Dimension {
    type Err = Error;

    /// A short name, else a column name taken as written.
    fn from_str(text: &str) -> Result<Self, Self::Err> {
        let text = text.trim();
        if text.is_empty() {
            return Err(Error::EmptyDimension);
        }
        Ok(Dimension::NAMED
            .iter()
            .find(|d| d.short_name() == Some(text))
            .cloned()
            .unwrap_or_else(|| Dimension::Column(text.to_string())))
    }
}

impl fmt::Display for Dimension {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match (self.short_name(), self) {
            (Some(short), _) => f.write_str(short),
            (None, Dimension::Column(name)) => f.write_str(name),
            (None, _) => Ok(()),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn short_names_round_trip() {
        for dim in Dimension::NAMED {
            let short = dim.short_name().unwrap_or_default();
            assert_eq!(short.parse::<Dimension>().ok(), Some(dim.clone()));
            assert_eq!(dim.to_string(), short);
        }
    }

    #[test]
    fn other_names_are_columns() {
        assert_eq!(
            "protocolIdentifier".parse::<Dimension>().ok(),
            Some(Dimension::Column("protocolIdentifier".to_string()))
        );
    }

    #[test]
    fn list_rejects_duplicates_and_empties() {
        assert!(matches!(
            Dimension::parse_list("reason,reason"),
            Err(Error::DuplicateDimension { .. })
        ));
        assert!(matches!(
            Dimension::parse_list("reason,,next-hop"),
            Err(Error::EmptyDimension)
        ));
        assert_eq!(
            Dimension::parse_list("next-hop, reason").ok(),
            Some(vec![Dimension::NextHop, Dimension::Reason])
        );
    }
}
