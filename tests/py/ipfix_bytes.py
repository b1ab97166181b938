"""IPFIX messages built byte by byte with `struct`, from the RFC 7011 layouts.

Independent of the workspace encoder: only the RFC text is used.

- Message Header (RFC 7011 section 3.1): version 10, length, export time,
  sequence number, observation domain id; 16 octets, network byte order.
- Set Header (section 3.3.2): set id, length (header included).
- Template Record (section 3.4.1): template id, field count, then field
  specifiers (section 3.2): id (with the enterprise bit 0x8000) and length,
  plus a 4-octet enterprise number when the bit is set.
- Options Template Record (section 3.4.2.2): template id, field count (all
  fields), scope field count, then specifiers, scope first.
- Withdrawal (section 8.1): template record with field count 0.
- Variable-length values (section 7): one length octet below 255, else 255
  and a 2-octet length.
- Sequence Number: Data Records sent before this message (section 3.1 with
  verified errata 4396), per observation domain.

Documentation values only: addresses from RFC 5737 / RFC 3849, PEN 32473.
"""

import struct

VARIABLE = 65535
PEN = 32473  # RFC 5612 documentation enterprise number


def field(ie, length, pen=None):
    """A field specifier (RFC 7011 section 3.2)."""
    if pen is None:
        return struct.pack("!HH", ie, length)
    return struct.pack("!HHI", ie | 0x8000, length, pen)


def template_set(templates):
    """Set 2 with (template_id, [field bytes]) records."""
    body = b"".join(struct.pack("!HH", tid, len(fields)) + b"".join(fields) for tid, fields in templates)
    return struct.pack("!HH", 2, 4 + len(body)) + body


def options_template_set(templates):
    """Set 3 with (template_id, [scope field bytes], [field bytes]) records."""
    body = b"".join(
        struct.pack("!HHH", tid, len(scope) + len(fields), len(scope)) + b"".join(scope) + b"".join(fields)
        for tid, scope, fields in templates
    )
    return struct.pack("!HH", 3, 4 + len(body)) + body


def withdrawal_set(template_ids, options=False):
    """Set 2 (or 3) withdrawing each id (RFC 7011 section 8.1)."""
    body = b"".join(struct.pack("!HH", tid, 0) for tid in template_ids)
    return struct.pack("!HH", 3 if options else 2, 4 + len(body)) + body


def data_set(template_id, records):
    """A Data Set of already-encoded records."""
    body = b"".join(records)
    return struct.pack("!HH", template_id, 4 + len(body)) + body


def varlen(value: bytes):
    """RFC 7011 section 7 variable-length encoding."""
    if len(value) < 255:
        return struct.pack("!B", len(value)) + value
    return struct.pack("!BH", 255, len(value)) + value


def ipv4(text):
    return bytes(int(p) for p in text.split("."))


class Exporter:
    """One observation domain's message stream with its Sequence Number."""

    def __init__(self, domain, sequence=0):
        self.domain = domain
        self.sequence = sequence

    def message(self, sets, export_time, data_records=0):
        """A message holding `sets`; `data_records` advances the sequence."""
        body = b"".join(sets)
        msg = struct.pack("!HHIII", 10, 16 + len(body), export_time, self.sequence, self.domain) + body
        self.sequence = (self.sequence + data_records) % (1 << 32)
        return msg


# The flow template used across tests (IANA ids from the IPFIX registry):
# sourceIPv4Address 8, destinationIPv4Address 12, packetDeltaCount 2,
# octetDeltaCount 1, protocolIdentifier 4, ingressInterface 10,
# flowEndMilliseconds 153, and an enterprise element (PEN 32473, id 7, 2 octets).
FLOW_TEMPLATE_ID = 256
FLOW_FIELDS = [
    field(8, 4),
    field(12, 4),
    field(2, 8),
    field(1, 8),
    field(4, 1),
    field(10, 4),
    field(153, 8),
    field(7, 2, pen=PEN),
]
FLOW_RECORD_LEN = 4 + 4 + 8 + 8 + 1 + 4 + 8 + 2

# Options template: scope ingressInterface (10), then interfaceName (82,
# variable length).
IFNAME_TEMPLATE_ID = 257
IF_NAMES = {1: "xe-0/0/1", 2: "xe-0/0/2", 3: "et-1/0/0"}

T0 = 1796000400  # 2026-11-30T01:00:00Z


def flow_values(k):
    """The values of flow record number k (deterministic)."""
    return {
        "sourceIPv4Address": f"192.0.2.{k % 200 + 1}",
        "destinationIPv4Address": f"198.51.100.{k % 100 + 1}",
        "packetDeltaCount": 100 + k,
        "octetDeltaCount": (100 + k) * 64,
        "protocolIdentifier": 6 if k % 2 == 0 else 17,
        "ingressInterface": 1 + k % 3,
        "flowEndMilliseconds": (T0 * 1000) + k * 10,
        "pen32473_ie7": struct.pack("!H", k % 65536),
    }


def flow_record(k):
    v = flow_values(k)
    return (
        ipv4(v["sourceIPv4Address"])
        + ipv4(v["destinationIPv4Address"])
        + struct.pack("!QQBIQ", v["packetDeltaCount"], v["octetDeltaCount"], v["protocolIdentifier"], v["ingressInterface"], v["flowEndMilliseconds"])
        + v["pen32473_ie7"]
    )


def ifname_record(if_index, name):
    return struct.pack("!I", if_index) + varlen(name.encode())


def flow_stream(exporter, records, per_message, export_time=T0, with_templates=True, options=True, start=0):
    """Messages carrying flow records start..start+records, `per_message`
    per message; the first message carries the templates (and options
    records naming the interfaces) when asked."""
    msgs = []
    k = start
    first = True
    while k < start + records:
        n = min(per_message, start + records - k)
        sets = []
        opt_records = 0
        if first and with_templates:
            sets.append(template_set([(FLOW_TEMPLATE_ID, FLOW_FIELDS)]))
            if options:
                sets.append(options_template_set([(IFNAME_TEMPLATE_ID, [field(10, 4)], [field(82, VARIABLE)])]))
                sets.append(data_set(IFNAME_TEMPLATE_ID, [ifname_record(i, nm) for i, nm in IF_NAMES.items()]))
                opt_records = len(IF_NAMES)
        sets.append(data_set(FLOW_TEMPLATE_ID, [flow_record(i) for i in range(k, k + n)]))
        msgs.append(exporter.message(sets, export_time + (k - start) // per_message, data_records=n + opt_records))
        k += n
        first = False
    return msgs
