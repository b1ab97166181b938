//! What the values of some Information Elements mean: the IANA
//! sub-registries for forwardingStatus (IE 89), mplsTopLabelType (IE 46),
//! srhIPv6ActiveSegmentType (IE 500), SRv6 endpoint behaviours (IE 502),
//! selectorAlgorithm (IE 304) and flowEndReason (IE 136), plus the MPLS
//! label stack entry layouts of IEs 70–79 and 316.
//!
//! Name style: short lower-case names made from the registry wording with
//! spaces replaced by hyphens (`"ACL deny"` → `"acl-deny"`), except
//! [`srv6_endpoint_behavior_name`], which keeps the registry's names. Values a
//! registry leaves unassigned give `None`; the numbers stay available to the
//! caller.

use std::borrow::Cow;
use std::fmt;

// ---------------------------------------------------------------------------
// forwardingStatus (IE 89)
// ---------------------------------------------------------------------------

/// A forwardingStatus value (IE 89; RFC 7270 §4.12; IANA "Forwarding
/// Status (Value 89)" sub-registry).
///
/// An open newtype: the raw value is kept as received, unknown codes
/// included. Meaning is defined only for the least-significant octet: its
/// top two bits are the status ([`ForwardingOutcome`]) and its low six bits
/// the reason code. RFC 7270 §4.12 allows the field in 1, 2 or 4 octets;
/// with 2 or 4 the meaningful octet is the last one on the wire, and the
/// other bits are reserved.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Default)]
pub struct ForwardingStatus(pub u32);

/// The status part of a forwardingStatus value: bits 7–6 of its
/// least-significant octet (IANA "Forwarding Status (Value 89)": 00b
/// Unknown, 01b Forwarded, 10b Dropped, 11b Consumed).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum ForwardingOutcome {
    /// 00b: Unknown.
    Unknown,
    /// 01b: Forwarded.
    Forwarded,
    /// 10b: Dropped.
    Dropped,
    /// 11b: Consumed (terminated by the device, e.g. addressed to it).
    Consumed,
}

impl ForwardingOutcome {
    /// `"unknown"`, `"forwarded"`, `"dropped"` or `"consumed"`.
    #[must_use]
    pub const fn name(self) -> &'static str {
        match self {
            Self::Unknown => "unknown",
            Self::Forwarded => "forwarded",
            Self::Dropped => "dropped",
            Self::Consumed => "consumed",
        }
    }
}

impl fmt::Display for ForwardingOutcome {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

/// Every assigned forwardingStatus code: (value of the least-significant
/// octet, reason name, label). Source: IANA "Forwarding Status (Value 89)"
/// sub-registry (facts sheet §5.2); reasons 0x40–0x42, 0x80–0x8F and
/// 0xC0–0xC3 also RFC 7270 §4.12, 0x43–0x44 from an individual registrant.
/// Names are the registry wording lower-cased, spaces → hyphens.
const FORWARDING_REASONS: [(u8, &str, &str); 25] = [
    (0x40, "unknown", "forwarded/unknown"),
    (0x41, "fragmented", "forwarded/fragmented"),
    (0x42, "not-fragmented", "forwarded/not-fragmented"),
    (0x43, "tunneled", "forwarded/tunneled"),
    (0x44, "acl-redirect", "forwarded/acl-redirect"),
    (0x80, "unknown", "dropped/unknown"),
    (0x81, "acl-deny", "dropped/acl-deny"),
    (0x82, "acl-drop", "dropped/acl-drop"),
    (0x83, "unroutable", "dropped/unroutable"),
    (0x84, "adjacency", "dropped/adjacency"),
    (0x85, "fragmentation-and-df-set", "dropped/fragmentation-and-df-set"),
    (0x86, "bad-header-checksum", "dropped/bad-header-checksum"),
    (0x87, "bad-total-length", "dropped/bad-total-length"),
    (0x88, "bad-header-length", "dropped/bad-header-length"),
    // RFC 7270's prose example calls 0x89 "Fragmentation and DF set"; its
    // table and the registry say bad TTL (facts sheet §5.1).
    (0x89, "bad-ttl", "dropped/bad-ttl"),
    (0x8A, "policer", "dropped/policer"),
    (0x8B, "wred", "dropped/wred"),
    (0x8C, "rpf", "dropped/rpf"),
    (0x8D, "for-us", "dropped/for-us"),
    (0x8E, "bad-output-interface", "dropped/bad-output-interface"),
    (0x8F, "hardware", "dropped/hardware"),
    (0xC0, "unknown", "consumed/unknown"),
    (0xC1, "punt-adjacency", "consumed/punt-adjacency"),
    (0xC2, "incomplete-adjacency", "consumed/incomplete-adjacency"),
    (0xC3, "for-us", "consumed/for-us"),
];

impl ForwardingStatus {
    /// Takes the decoded unsigned value of an IE 89 field of any length.
    ///
    /// The field may arrive in 1, 2 or 4 octets (RFC 7270 §4.12); decode it
    /// as a big-endian unsigned integer and pass the result here. Bits above
    /// 32 (not possible for a valid unsigned32 field) are dropped.
    #[must_use]
    pub const fn from_raw(v: u64) -> Self {
        Self((v & 0xFFFF_FFFF) as u32)
    }

    /// The least-significant octet, the only one with a defined meaning;
    /// the other bits are reserved (IANA IE 89, facts sheet §5.1).
    #[must_use]
    pub const fn octet(self) -> u8 {
        (self.0 & 0xFF) as u8
    }

    /// The status: bits 7–6 of the least-significant octet.
    #[must_use]
    pub const fn outcome(self) -> ForwardingOutcome {
        match self.octet() >> 6 {
            0 => ForwardingOutcome::Unknown,
            1 => ForwardingOutcome::Forwarded,
            2 => ForwardingOutcome::Dropped,
            _ => ForwardingOutcome::Consumed,
        }
    }

    /// The reason code: bits 5–0 of the least-significant octet.
    #[must_use]
    pub const fn reason_code(self) -> u8 {
        self.octet() & 0x3F
    }

    /// The registry's reason name for this status and reason, lower-cased
    /// with hyphens (e.g. 0x81 → `"acl-deny"`, 0x89 → `"bad-ttl"`,
    /// 0xC3 → `"for-us"`); `None` for unassigned codes.
    #[must_use]
    pub fn reason_name(self) -> Option<&'static str> {
        self.entry().map(|(_, reason, _)| reason)
    }

    /// `outcome/reason`, e.g. `"dropped/acl-deny"`; an unassigned reason is
    /// written as its number, e.g. `"dropped/reason-63"` for 0xBF.
    #[must_use]
    pub fn label(self) -> Cow<'static, str> {
        match self.entry() {
            Some((_, _, label)) => Cow::Borrowed(label),
            None => Cow::Owned(format!("{}/reason-{}", self.outcome().name(), self.reason_code())),
        }
    }

    fn entry(self) -> Option<(u8, &'static str, &'static str)> {
        let octet = self.octet();
        FORWARDING_REASONS.iter().copied().find(|&(code, _, _)| code == octet)
    }
}

impl fmt::Display for ForwardingStatus {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.label())
    }
}

// ---------------------------------------------------------------------------
// MPLS (IEs 46, 70-79, 316)
// ---------------------------------------------------------------------------

/// One MPLS label stack entry (RFC 3032 §2.1): Label (20 bits), Traffic
/// Class (3 bits, formerly EXP, RFC 5462), Bottom of Stack (1 bit), TTL
/// (8 bits).
///
/// IPFIX carries it in two forms. mplsTopLabelStackSection (IE 70) and
/// mplsLabelStackSection2..10 (IEs 71–79) hold the first **3** octets of the
/// entry, without TTL (IANA IE 70, 71). mplsLabelStackSection (IE 316) holds
/// raw packet octets, i.e. whole 4-octet entries with TTL (IANA IE 316).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub struct LabelStackEntry {
    /// The 20-bit label value.
    pub label: u32,
    /// The 3-bit Traffic Class (EXP) field.
    pub traffic_class: u8,
    /// The S bit: set on the last entry of the stack.
    pub bottom_of_stack: bool,
    /// The TTL, present only in the 4-octet form.
    pub ttl: Option<u8>,
}

impl LabelStackEntry {
    /// Decodes a label stack entry from 3 octets (IEs 70–79, no TTL) or
    /// 4 octets (RFC 3032 §2.1 entry, with TTL). Other lengths give `None`.
    ///
    /// Layout of the first 3 octets `b0 b1 b2`: label =
    /// `b0 << 12 | b1 << 4 | b2 >> 4`, traffic class = `(b2 >> 1) & 7`,
    /// bottom of stack = `b2 & 1` (RFC 3032 §2.1).
    #[must_use]
    pub fn from_section(bytes: &[u8]) -> Option<Self> {
        let (b0, b1, b2, ttl) = match *bytes {
            [b0, b1, b2] => (b0, b1, b2, None),
            [b0, b1, b2, ttl] => (b0, b1, b2, Some(ttl)),
            _ => return None,
        };
        Some(Self {
            label: (u32::from(b0) << 12) | (u32::from(b1) << 4) | (u32::from(b2) >> 4),
            traffic_class: (b2 >> 1) & 0x07,
            bottom_of_stack: b2 & 0x01 == 1,
            ttl,
        })
    }

    /// Encodes the 3-octet IPFIX form (IEs 70–79): label, traffic class and
    /// S bit; the TTL is left out. Bits beyond the 20-bit label and 3-bit
    /// traffic class are ignored.
    #[must_use]
    pub const fn to_section(&self) -> [u8; 3] {
        let label = self.label & 0xF_FFFF;
        [
            (label >> 12) as u8,
            ((label >> 4) & 0xFF) as u8,
            (((label & 0x0F) as u8) << 4) | ((self.traffic_class & 0x07) << 1) | (self.bottom_of_stack as u8),
        ]
    }

    /// The name of a special-purpose label (IANA "Special-Purpose MPLS
    /// Label Values", facts sheet §6.2), lower-cased with hyphens; `None` for
    /// the unassigned values 5–6 and 8–12 and for labels 16 and up.
    ///
    /// | Label | Registry wording |
    /// |---|---|
    /// | 0 | IPv4 Explicit NULL |
    /// | 1 | Router Alert |
    /// | 2 | IPv6 Explicit NULL |
    /// | 3 | Implicit NULL |
    /// | 4 | MPLS Network Actions |
    /// | 7 | Entropy Label Indicator |
    /// | 13 | GAL |
    /// | 14 | OAM Alert |
    /// | 15 | Extension Label (XL) |
    #[must_use]
    pub const fn special_purpose_name(label: u32) -> Option<&'static str> {
        Some(match label {
            0 => "ipv4-explicit-null",
            1 => "router-alert",
            2 => "ipv6-explicit-null",
            3 => "implicit-null",
            4 => "mpls-network-actions",
            7 => "entropy-label-indicator",
            13 => "gal",
            14 => "oam-alert",
            15 => "extension-label",
            _ => return None,
        })
    }

    /// [`Self::special_purpose_name`] of this entry's label.
    #[must_use]
    pub const fn special_purpose(&self) -> Option<&'static str> {
        Self::special_purpose_name(self.label)
    }
}

/// Decodes the raw label stack of mplsLabelStackSection (IE 316): 4-octet
/// entries from the head of the stack (IANA IE 316; RFC 3032 §2.1).
///
/// Stops after the entry with the Bottom of Stack bit, so octets after the
/// stack (e.g. the start of the payload) are not read as labels. A trailing
/// piece shorter than 4 octets is ignored.
#[must_use]
pub fn label_stack_from_raw(bytes: &[u8]) -> Vec<LabelStackEntry> {
    let mut stack = Vec::with_capacity(bytes.len() / 4);
    for chunk in bytes.chunks_exact(4) {
        let Some(entry) = LabelStackEntry::from_section(chunk) else { break };
        stack.push(entry);
        if entry.bottom_of_stack {
            break;
        }
    }
    stack
}

/// Names an mplsTopLabelType (IE 46) value: the control protocol that
/// allocated the top label (IANA "IPFIX MPLS label type (Value 46)", facts
/// sheet §6.1). Short names of our own; `None` for 11–255 (unassigned).
///
/// | Value | Name | Registry wording |
/// |---|---|---|
/// | 0 | `unknown` | Unknown |
/// | 1 | `te-midpt` | TE-MIDPT: any TE tunnel mid-point or tail label |
/// | 2 | `pseudowire` | Pseudowire (PWE3-based label) |
/// | 3 | `vpn` | VPN |
/// | 4 | `bgp` | BGP |
/// | 5 | `ldp` | LDP |
/// | 6 | `pce` | Path Computation Element |
/// | 7 | `ospfv2-sr` | OSPFv2 Segment Routing |
/// | 8 | `ospfv3-sr` | OSPFv3 Segment Routing |
/// | 9 | `isis-sr` | IS-IS Segment Routing |
/// | 10 | `bgp-prefix-sid` | BGP Segment Routing Prefix-SID |
///
/// The wording is the facts sheet's rendering of the registry entries.
#[must_use]
pub const fn mpls_label_type_name(v: u8) -> Option<&'static str> {
    Some(match v {
        0 => "unknown",
        1 => "te-midpt",
        2 => "pseudowire",
        3 => "vpn",
        4 => "bgp",
        5 => "ldp",
        6 => "pce",
        7 => "ospfv2-sr",
        8 => "ospfv3-sr",
        9 => "isis-sr",
        10 => "bgp-prefix-sid",
        _ => return None,
    })
}

// ---------------------------------------------------------------------------
// SRv6 (IEs 500, 502)
// ---------------------------------------------------------------------------

/// Names an srhIPv6ActiveSegmentType (IE 500) value: where the active
/// segment was learned (IANA "IPFIX IPv6 SRH Segment Type (Value 500)",
/// RFC 9487; facts sheet §7.2). `None` for 6–255 (unassigned).
///
/// | Value | Name | Registry wording |
/// |---|---|---|
/// | 0 | `unknown` | Unknown |
/// | 1 | `segment-routing-policy` | Segment Routing Policy |
/// | 2 | `path-computation-element` | Path Computation Element |
/// | 3 | `ospfv3-segment-routing` | OSPFv3 Segment Routing |
/// | 4 | `is-is-segment-routing` | IS-IS Segment Routing |
/// | 5 | `bgp-segment-routing-prefix-sid` | BGP Segment Routing Prefix-SID |
#[must_use]
pub const fn srh_segment_type_name(v: u8) -> Option<&'static str> {
    Some(match v {
        0 => "unknown",
        1 => "segment-routing-policy",
        2 => "path-computation-element",
        3 => "ospfv3-segment-routing",
        4 => "is-is-segment-routing",
        5 => "bgp-segment-routing-prefix-sid",
        _ => return None,
    })
}

/// Names an SRv6 Endpoint Behavior code point (srhSegmentIPv6EndpointBehavior,
/// IE 502; IANA "SRv6 Endpoint Behaviors", created by RFC 8986; facts sheet
/// §7.1), keeping the registry's names, e.g. `"End.DT4"`, `"End with PSP"`.
///
/// Reserved values (0, 25, 34816–65534) give `"Reserved"`, the Private Use
/// range 32768–34815 gives `"private-use"`, 65535 `"Opaque"`. Values the
/// facts sheet does not list (73–74, 76–83, 96–100, 113, 125–157, 161–32766)
/// give `None`.
///
/// Flavours: PSP penultimate segment pop, USP ultimate segment pop, USD
/// ultimate segment decapsulation (expansions from memory, unconfirmed).
/// Where the sheet gives a range as "the same flavour combinations", the
/// individual names below were spelt out by us following the pattern of the
/// names the sheet does write out (marked *inferred* in the code).
#[must_use]
pub const fn srv6_endpoint_behavior_name(v: u16) -> Option<&'static str> {
    Some(match v {
        0 | 25 | 34816..=65534 => "Reserved",
        1 => "End",
        2 => "End with PSP",
        3 => "End with USP",
        4 => "End with PSP & USP",
        5 => "End.X",
        6 => "End.X with PSP",
        7 => "End.X with USP",
        8 => "End.X with PSP & USP",
        9 => "End.T",
        10 => "End.T with PSP",
        11 => "End.T with USP",
        12 => "End.T with PSP & USP",
        13 => "End.B6.Insert",
        14 => "End.B6.Encaps",
        15 => "End.BM",
        16 => "End.DX6",
        17 => "End.DX4",
        18 => "End.DT6",
        19 => "End.DT4",
        20 => "End.DT46",
        21 => "End.DX2",
        22 => "End.DX2V",
        23 => "End.DT2U",
        24 => "End.DT2M",
        26 => "End.B6.Insert.Red",
        27 => "End.B6.Encaps.Red",
        // 28-39: the sheet writes the four USD combinations for End and
        // says "the same four" for End.X and End.T (inferred for 32-39).
        28 => "End with USD",
        29 => "End with PSP & USD",
        30 => "End with USP & USD",
        31 => "End with PSP, USP & USD",
        32 => "End.X with USD",
        33 => "End.X with PSP & USD",
        34 => "End.X with USP & USD",
        35 => "End.X with PSP, USP & USD",
        36 => "End.T with USD",
        37 => "End.T with PSP & USD",
        38 => "End.T with USP & USD",
        39 => "End.T with PSP, USP & USD",
        40 => "End.MAP",
        41 => "End.Limit",
        42 => "End with NEXT-ONLY-CSID",
        // 43-50, 52-59, 85-92: the sheet gives "with NEXT-CSID" for the first
        // value and "+PSP, +USP, ..." for the rest; joining them as
        // "with NEXT-CSID & PSP" etc. is inferred.
        43 => "End with NEXT-CSID",
        44 => "End with NEXT-CSID & PSP",
        45 => "End with NEXT-CSID & USP",
        46 => "End with NEXT-CSID, PSP & USP",
        47 => "End with NEXT-CSID & USD",
        48 => "End with NEXT-CSID, PSP & USD",
        49 => "End with NEXT-CSID, USP & USD",
        50 => "End with NEXT-CSID, PSP, USP & USD",
        51 => "End.X with NEXT-ONLY-CSID",
        52 => "End.X with NEXT-CSID",
        53 => "End.X with NEXT-CSID & PSP",
        54 => "End.X with NEXT-CSID & USP",
        55 => "End.X with NEXT-CSID, PSP & USP",
        56 => "End.X with NEXT-CSID & USD",
        57 => "End.X with NEXT-CSID, PSP & USD",
        58 => "End.X with NEXT-CSID, USP & USD",
        59 => "End.X with NEXT-CSID, PSP, USP & USD",
        // 60-68: the sheet lists these short names, noting each equals the
        // End.Dxx behaviour with NEXT-CSID; registry spelling unconfirmed.
        60 => "uDX6",
        61 => "uDX4",
        62 => "uDT6",
        63 => "uDT4",
        64 => "uDT46",
        65 => "uDX2",
        66 => "uDX2V",
        67 => "uDT2U",
        68 => "uDT2M",
        // 69-72: the sheet writes "End.M.GTP6.D / GTP6.Di / GTP6.E / GTP4.E".
        69 => "End.M.GTP6.D",
        70 => "End.M.GTP6.Di",
        71 => "End.M.GTP6.E",
        72 => "End.M.GTP4.E",
        75 => "End.Replicate",
        84 => "End.NSH",
        85 => "End.T with NEXT-CSID",
        86 => "End.T with NEXT-CSID & PSP",
        87 => "End.T with NEXT-CSID & USP",
        88 => "End.T with NEXT-CSID, PSP & USP",
        89 => "End.T with NEXT-CSID & USD",
        90 => "End.T with NEXT-CSID, PSP & USD",
        91 => "End.T with NEXT-CSID, USP & USD",
        92 => "End.T with NEXT-CSID, PSP, USP & USD",
        93 => "End.B6.Encaps with NEXT-CSID",
        94 => "End.B6.Encaps.Red with NEXT-CSID",
        95 => "End.BM with NEXT-CSID",
        // 101-112: the sheet names 101, 105 and 109 and gives "+PSP, +USP,
        // +PSP&USP" for the three after each (inferred spelling).
        101 => "End with REPLACE-CSID",
        102 => "End with REPLACE-CSID & PSP",
        103 => "End with REPLACE-CSID & USP",
        104 => "End with REPLACE-CSID, PSP & USP",
        105 => "End.X with REPLACE-CSID",
        106 => "End.X with REPLACE-CSID & PSP",
        107 => "End.X with REPLACE-CSID & USP",
        108 => "End.X with REPLACE-CSID, PSP & USP",
        109 => "End.T with REPLACE-CSID",
        110 => "End.T with REPLACE-CSID & PSP",
        111 => "End.T with REPLACE-CSID & USP",
        112 => "End.T with REPLACE-CSID, PSP & USP",
        // 114-124: eleven behaviours listed in order "with REPLACE-CSID"
        // (one per value; the one-to-one order is inferred).
        114 => "End.B6.Encaps with REPLACE-CSID",
        115 => "End.BM with REPLACE-CSID",
        116 => "End.DX6 with REPLACE-CSID",
        117 => "End.DX4 with REPLACE-CSID",
        118 => "End.DT6 with REPLACE-CSID",
        119 => "End.DT4 with REPLACE-CSID",
        120 => "End.DT46 with REPLACE-CSID",
        121 => "End.DX2 with REPLACE-CSID",
        122 => "End.DX2V with REPLACE-CSID",
        123 => "End.DT2U with REPLACE-CSID",
        124 => "End.DT2M with REPLACE-CSID",
        158 => "End.DX1",
        159 => "End.DX1 with NEXT-CSID",
        160 => "End.DX1 with REPLACE-CSID",
        32767 => "The SID defined in RFC 8754",
        32768..=34815 => "private-use",
        65535 => "Opaque",
        _ => return None,
    })
}

// ---------------------------------------------------------------------------
// selectorAlgorithm (IE 304), flowEndReason (IE 136)
// ---------------------------------------------------------------------------

/// Names a selectorAlgorithm (IE 304) value (IANA "PSAMP selectorAlgorithm
/// Identifiers", RFC 5476 §6.5.2; facts sheet §8.2). `None` for 0
/// (Reserved) and 9–65535 (unassigned).
///
/// | Value | Name | Registry wording |
/// |---|---|---|
/// | 1 | `systematic-count-based-sampling` | Systematic count-based Sampling |
/// | 2 | `systematic-time-based-sampling` | Systematic time-based Sampling |
/// | 3 | `random-n-out-of-n-sampling` | Random n-out-of-N Sampling |
/// | 4 | `uniform-probabilistic-sampling` | Uniform probabilistic Sampling |
/// | 5 | `property-match-filtering` | Property match Filtering |
/// | 6 | `hash-based-filtering-using-bob` | Hash based Filtering using BOB |
/// | 7 | `hash-based-filtering-using-ipsx` | Hash based Filtering using IPSX |
/// | 8 | `hash-based-filtering-using-crc` | Hash based Filtering using CRC |
///
/// These are not the codes of the deprecated samplingAlgorithm (IE 35) and
/// samplerMode (IE 49), where 1 = deterministic and 2 = random (RFC 7270).
#[must_use]
pub const fn selector_algorithm_name(v: u16) -> Option<&'static str> {
    Some(match v {
        1 => "systematic-count-based-sampling",
        2 => "systematic-time-based-sampling",
        3 => "random-n-out-of-n-sampling",
        4 => "uniform-probabilistic-sampling",
        5 => "property-match-filtering",
        6 => "hash-based-filtering-using-bob",
        7 => "hash-based-filtering-using-ipsx",
        8 => "hash-based-filtering-using-crc",
        _ => return None,
    })
}

/// Names a flowEndReason (IE 136) value: why the Flow was ended (IANA
/// "flowEndReason (Value 136)", RFC 5102; facts sheet §4d). `None` for 0
/// (reserved) and 6–255.
///
/// | Value | Name | Registry wording |
/// |---|---|---|
/// | 0x01 | `idle-timeout` | idle timeout |
/// | 0x02 | `active-timeout` | active timeout |
/// | 0x03 | `end-of-flow-detected` | end of Flow detected |
/// | 0x04 | `forced-end` | forced end |
/// | 0x05 | `lack-of-resources` | lack of resources |
#[must_use]
pub const fn flow_end_reason_name(v: u8) -> Option<&'static str> {
    Some(match v {
        0x01 => "idle-timeout",
        0x02 => "active-timeout",
        0x03 => "end-of-flow-detected",
        0x04 => "forced-end",
        0x05 => "lack-of-resources",
        _ => return None,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Big-endian unsigned value of a 1-, 2- or 4-octet field.
    fn be(bytes: &[u8]) -> u64 {
        bytes.iter().fold(0, |acc, &b| (acc << 8) | u64::from(b))
    }

    /// Every code of facts sheet §5.2 (IANA "Forwarding Status (Value 89)";
    /// RFC 7270 §4.12), sent in 1, 2 and 4 octets.
    #[test]
    fn forwarding_status_codes_from_registry() {
        use ForwardingOutcome::{Consumed, Dropped, Forwarded};
        let codes: [(u8, ForwardingOutcome, &str); 25] = [
            (0x40, Forwarded, "unknown"),
            (0x41, Forwarded, "fragmented"),
            (0x42, Forwarded, "not-fragmented"),
            (0x43, Forwarded, "tunneled"),
            (0x44, Forwarded, "acl-redirect"),
            (0x80, Dropped, "unknown"),
            (0x81, Dropped, "acl-deny"),
            (0x82, Dropped, "acl-drop"),
            (0x83, Dropped, "unroutable"),
            (0x84, Dropped, "adjacency"),
            (0x85, Dropped, "fragmentation-and-df-set"),
            (0x86, Dropped, "bad-header-checksum"),
            (0x87, Dropped, "bad-total-length"),
            (0x88, Dropped, "bad-header-length"),
            (0x89, Dropped, "bad-ttl"),
            (0x8A, Dropped, "policer"),
            (0x8B, Dropped, "wred"),
            (0x8C, Dropped, "rpf"),
            (0x8D, Dropped, "for-us"),
            (0x8E, Dropped, "bad-output-interface"),
            (0x8F, Dropped, "hardware"),
            (0xC0, Consumed, "unknown"),
            (0xC1, Consumed, "punt-adjacency"),
            (0xC2, Consumed, "incomplete-adjacency"),
            (0xC3, Consumed, "for-us"),
        ];
        for (code, outcome, reason) in codes {
            // RFC 7270 §4.12: 1, 2 or 4 octets; the status octet is last.
            for wire in [vec![code], vec![0, code], vec![0, 0, 0, code]] {
                let status = ForwardingStatus::from_raw(be(&wire));
                assert_eq!(status.outcome(), outcome, "{wire:02x?}");
                assert_eq!(status.reason_code(), code & 0x3F, "{wire:02x?}");
                assert_eq!(status.reason_name(), Some(reason), "{wire:02x?}");
                assert_eq!(status.label(), format!("{}/{reason}", outcome.name()));
            }
        }
        // IANA: 0x81 in 4 and 2 octets, spelled out.
        assert_eq!(ForwardingStatus::from_raw(0x0000_0081).label(), "dropped/acl-deny");
        assert_eq!(ForwardingStatus::from_raw(0x0081).label(), "dropped/acl-deny");
        // status = value >> 6: 0x81 = 0b10_000001 -> status 2 (Dropped), reason 1.
        assert_eq!(ForwardingStatus::from_raw(0x81).reason_code(), 1);
    }

    #[test]
    fn forwarding_status_unassigned_and_reserved_bits() {
        // IANA: 0x00-0x3F, 0x45-0x7F, 0x90-0xBF, 0xC4-0xFF unassigned.
        for code in (0x00..=0x3Fu8).chain(0x45..=0x7F).chain(0x90..=0xBF).chain(0xC4..=0xFF) {
            assert_eq!(ForwardingStatus::from_raw(u64::from(code)).reason_name(), None, "{code:#x}");
        }
        let s = ForwardingStatus::from_raw(0xBF);
        assert_eq!((s.outcome(), s.reason_code()), (ForwardingOutcome::Dropped, 63));
        assert_eq!(s.label(), "dropped/reason-63");
        assert_eq!(ForwardingStatus::from_raw(0).label(), "unknown/reason-0");
        // Only the least-significant octet has meaning (IANA IE 89); the
        // reserved upper bits are kept, not interpreted.
        let s = ForwardingStatus::from_raw(0x1234_5681);
        assert_eq!((s.0, s.label().as_ref()), (0x1234_5681, "dropped/acl-deny"));
        assert_eq!(ForwardingStatus::from_raw(u64::MAX).outcome(), ForwardingOutcome::Consumed);
        assert_eq!(ForwardingStatus(0xC3).to_string(), "consumed/for-us");
        assert_eq!(ForwardingOutcome::Forwarded.to_string(), "forwarded");
    }

    /// RFC 3032 §2.1 layout, computed by hand:
    /// label 16004 = 0x03E84 (20 bits: 0000 0011 1110 1000 0100),
    /// TC 5 = 101b, S = 1, TTL 64 = 0x40.
    /// octet 0 = label >> 12 = 0x03; octet 1 = (label >> 4) & 0xFF = 0xE8;
    /// octet 2 = (label & 0xF) << 4 | TC << 1 | S = 0x40 | 0x0A | 0x01 = 0x4B;
    /// octet 3 = TTL = 0x40. Entry: 03 E8 4B 40.
    #[test]
    fn label_stack_entry_worked_example() {
        let full = LabelStackEntry::from_section(&[0x03, 0xE8, 0x4B, 0x40]).expect("4 octets");
        assert_eq!(
            full,
            LabelStackEntry { label: 16004, traffic_class: 5, bottom_of_stack: true, ttl: Some(64) }
        );
        // IANA IE 70: the 3-octet form is the same minus the TTL.
        let short = LabelStackEntry::from_section(&[0x03, 0xE8, 0x4B]).expect("3 octets");
        assert_eq!(short, LabelStackEntry { ttl: None, ..full });
        assert_eq!(full.to_section(), [0x03, 0xE8, 0x4B]);
        // Largest label 0xFFFFF, TC 0, S 0: FF FF F0.
        let max = LabelStackEntry::from_section(&[0xFF, 0xFF, 0xF0]).expect("3 octets");
        assert_eq!((max.label, max.traffic_class, max.bottom_of_stack), (0xF_FFFF, 0, false));
        assert_eq!(max.to_section(), [0xFF, 0xFF, 0xF0]);
        for len in [0, 1, 2, 5, 8] {
            assert_eq!(LabelStackEntry::from_section(&vec![0; len]), None, "len {len}");
        }
    }

    /// IE 316 raw stack. Top entry by hand: label 24001 = 0x05DC1,
    /// TC 0, S 0, TTL 255 -> 05 DC 10 FF ((0x1 << 4) | 0 | 0 = 0x10).
    /// Second: 03 E8 4B 40 as above (S = 1). Then an IPv4 header start
    /// (45 00 ...) that must not be read as a label.
    #[test]
    fn raw_label_stack_stops_at_bottom() {
        let raw = [0x05, 0xDC, 0x10, 0xFF, 0x03, 0xE8, 0x4B, 0x40, 0x45, 0x00, 0x00, 0x54];
        let stack = label_stack_from_raw(&raw);
        assert_eq!(stack.len(), 2);
        assert_eq!(
            stack.first(),
            Some(&LabelStackEntry { label: 24001, traffic_class: 0, bottom_of_stack: false, ttl: Some(255) })
        );
        assert_eq!(stack.get(1).map(|e| (e.label, e.bottom_of_stack)), Some((16004, true)));
        // No bottom-of-stack bit: every whole entry, trailing piece dropped.
        assert_eq!(label_stack_from_raw(&[0x05, 0xDC, 0x10, 0xFF, 0x03]).len(), 1);
        assert!(label_stack_from_raw(&[]).is_empty());
    }

    /// IANA "Special-Purpose MPLS Label Values" (facts sheet §6.2).
    #[test]
    fn special_purpose_labels() {
        let named = [
            (0, "ipv4-explicit-null"),
            (1, "router-alert"),
            (2, "ipv6-explicit-null"),
            (3, "implicit-null"),
            (4, "mpls-network-actions"),
            (7, "entropy-label-indicator"),
            (13, "gal"),
            (14, "oam-alert"),
            (15, "extension-label"),
        ];
        for (label, name) in named {
            assert_eq!(LabelStackEntry::special_purpose_name(label), Some(name));
        }
        for label in [5, 6, 8, 9, 10, 11, 12, 16, 0xF_FFFF] {
            assert_eq!(LabelStackEntry::special_purpose_name(label), None, "{label}");
        }
        let explicit_null = LabelStackEntry::from_section(&[0x00, 0x00, 0x01]).expect("3 octets");
        assert_eq!(explicit_null.special_purpose(), Some("ipv4-explicit-null"));
    }

    /// IANA "IPFIX MPLS label type (Value 46)" (facts sheet §6.1).
    #[test]
    fn mpls_label_types() {
        assert_eq!(mpls_label_type_name(0), Some("unknown"));
        assert_eq!(mpls_label_type_name(1), Some("te-midpt"));
        assert_eq!(mpls_label_type_name(5), Some("ldp"));
        assert_eq!(mpls_label_type_name(9), Some("isis-sr"));
        assert_eq!(mpls_label_type_name(10), Some("bgp-prefix-sid"));
        assert_eq!(mpls_label_type_name(11), None);
        assert_eq!(mpls_label_type_name(255), None);
    }

    /// IANA "SRv6 Endpoint Behaviors" (facts sheet §7.1).
    #[test]
    fn srv6_endpoint_behaviors() {
        let sample = [
            (0, "Reserved"),
            (1, "End"),
            (2, "End with PSP"),
            (4, "End with PSP & USP"),
            (5, "End.X"),
            (9, "End.T"),
            (15, "End.BM"),
            (16, "End.DX6"),
            (19, "End.DT4"),
            (20, "End.DT46"),
            (24, "End.DT2M"),
            (25, "Reserved"),
            (27, "End.B6.Encaps.Red"),
            (28, "End with USD"),
            (31, "End with PSP, USP & USD"),
            (40, "End.MAP"),
            (42, "End with NEXT-ONLY-CSID"),
            (43, "End with NEXT-CSID"),
            (51, "End.X with NEXT-ONLY-CSID"),
            (52, "End.X with NEXT-CSID"),
            (69, "End.M.GTP6.D"),
            (72, "End.M.GTP4.E"),
            (75, "End.Replicate"),
            (84, "End.NSH"),
            (85, "End.T with NEXT-CSID"),
            (95, "End.BM with NEXT-CSID"),
            (101, "End with REPLACE-CSID"),
            (105, "End.X with REPLACE-CSID"),
            (109, "End.T with REPLACE-CSID"),
            (114, "End.B6.Encaps with REPLACE-CSID"),
            (124, "End.DT2M with REPLACE-CSID"),
            (158, "End.DX1"),
            (160, "End.DX1 with REPLACE-CSID"),
            (32767, "The SID defined in RFC 8754"),
            (32768, "private-use"),
            (34815, "private-use"),
            (34816, "Reserved"),
            (65534, "Reserved"),
            (65535, "Opaque"),
        ];
        for (v, name) in sample {
            assert_eq!(srv6_endpoint_behavior_name(v), Some(name), "{v}");
        }
        // Not listed by the sheet: treated as unknown numbers.
        for v in [73, 76, 96, 113, 125, 161, 190, 32766] {
            assert_eq!(srv6_endpoint_behavior_name(v), None, "{v}");
        }
        // Every listed code point 1..=160 has a distinct name.
        let mut names: Vec<&str> = (1..=160).filter_map(srv6_endpoint_behavior_name).collect();
        let listed = names.len();
        names.sort_unstable();
        names.dedup();
        assert_eq!(names.len(), listed);
    }

    /// IANA "IPFIX IPv6 SRH Segment Type (Value 500)" (facts sheet §7.2).
    #[test]
    fn srh_segment_types() {
        assert_eq!(srh_segment_type_name(0), Some("unknown"));
        assert_eq!(srh_segment_type_name(1), Some("segment-routing-policy"));
        assert_eq!(srh_segment_type_name(4), Some("is-is-segment-routing"));
        assert_eq!(srh_segment_type_name(5), Some("bgp-segment-routing-prefix-sid"));
        assert_eq!(srh_segment_type_name(6), None);
    }

    /// IANA "PSAMP selectorAlgorithm Identifiers" (facts sheet §8.2) and
    /// flowEndReason (facts sheet §4d).
    #[test]
    fn selector_algorithms_and_flow_end_reasons() {
        assert_eq!(selector_algorithm_name(0), None);
        assert_eq!(selector_algorithm_name(1), Some("systematic-count-based-sampling"));
        assert_eq!(selector_algorithm_name(3), Some("random-n-out-of-n-sampling"));
        assert_eq!(selector_algorithm_name(8), Some("hash-based-filtering-using-crc"));
        assert_eq!(selector_algorithm_name(9), None);
        assert_eq!(flow_end_reason_name(0), None);
        assert_eq!(flow_end_reason_name(0x01), Some("idle-timeout"));
        assert_eq!(flow_end_reason_name(0x03), Some("end-of-flow-detected"));
        assert_eq!(flow_end_reason_name(0x05), Some("lack-of-resources"));
        assert_eq!(flow_end_reason_name(0x06), None);
    }
}
