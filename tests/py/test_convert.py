"""End-to-end: captures built by independent writers, converted by
`flowsift convert`, read back by pyarrow and DuckDB.

Sources of truth, named per check:
- Frames and containers: scapy (PyPI `scapy`): Ethernet, 802.1Q, Linux
  cooked capture, IPv4/IPv6, UDP, TCP, IPv4 fragmentation, pcap and pcapng
  writers.
- IPFIX payloads: `ipfix_bytes.py`, built with `struct` from the RFC 7011
  layouts (not the workspace encoder).
- Reading back: pyarrow (PyPI `pyarrow`) for Arrow types, values and Parquet
  metadata; DuckDB (PyPI `duckdb`) for SQL aggregates over the same files.
- Expected values: the deterministic formula `ipfix_bytes.flow_values(k)`.

Run: `cargo build -p flowsift`, then `pytest tests/py` ($FLOWSIFT_BIN, else
$CARGO_TARGET_DIR/debug/flowsift, CARGO_TARGET_DIR defaulting to
/var/tmp/flowsift-target).
"""

import json
import os
import subprocess

import duckdb
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from scapy.layers.inet import IP, TCP, UDP, fragment
from scapy.layers.inet6 import IPv6, IPv6ExtHdrFragment, fragment6
from scapy.layers.l2 import ARP, CookedLinux, Dot1Q, Ether, Loopback
from scapy.packet import Raw
from scapy.utils import wrpcap, wrpcapng

import ipfix_bytes as ix
from flowsift_cli import flowsift_bin

EXPORTER = "192.0.2.1"
EXPORTER6 = "2001:db8::1"
COLLECTOR = "198.51.100.9"
COLLECTOR6 = "2001:db8::9"
TS_MS = pa.timestamp("ms", tz="UTC")
TS_S = pa.timestamp("s", tz="UTC")
MAC = dict(src="00:00:5e:00:53:01", dst="00:00:5e:00:53:02")



def run(*args, stdin=None):
    binary = flowsift_bin()
    assert os.path.exists(binary), f"{binary} missing: run `cargo build -p flowsift` first"
    return subprocess.run([binary, *map(str, args)], capture_output=True, input=stdin, check=False)


def convert(tmp_path, *inputs, extra=(), name="flows.parquet", expect=0):
    out = tmp_path / name
    stats = tmp_path / (name + ".stats.json")
    proc = run("convert", *inputs, "-o", out, "--stats-json", stats, *extra)
    assert proc.returncode == expect, proc.stderr.decode()
    if expect != 0:
        return proc, None, None
    return proc, out, json.loads(stats.read_text())


def udp_packets(msgs, src=EXPORTER, dst=COLLECTOR, sport=50000, dport=4739, t=ix.T0, link="eth"):
    pkts = []
    for i, m in enumerate(msgs):
        if ":" in src:
            ip = IPv6(src=src, dst=dst) / UDP(sport=sport, dport=dport) / Raw(m)
        else:
            ip = IP(src=src, dst=dst) / UDP(sport=sport, dport=dport) / Raw(m)
        if link == "eth":
            p = Ether(src="00:00:5e:00:53:01", dst="00:00:5e:00:53:02") / ip
        elif link == "vlan":
            p = Ether(src="00:00:5e:00:53:01", dst="00:00:5e:00:53:02") / Dot1Q(vlan=100) / ip
        elif link == "raw":
            p = ip
        elif link == "loopback":
            p = Loopback(type=24 if ":" in src else 2) / ip
        elif link == "sll":
            p = CookedLinux(pkttype=0, lladdrtype=1, lladdrlen=6, src=b"\x00\x00\x5e\x00\x53\x01\x00\x00", proto=0x86DD if ":" in src else 0x0800) / ip
        else:
            raise ValueError(link)
        p.time = t + i * 0.01
        pkts.append(p)
    return pkts


def expected_rows(ks):
    return [ix.flow_values(k) for k in ks]


def check_flows_table(path, ks, exporter=EXPORTER, domain=7, names=True):
    """pyarrow: Arrow types and every value of the flows table."""
    table = pq.read_table(path)
    schema = table.schema
    # Arrow types of the Parquet contract (columnar module docs).
    assert schema.field("exporter").type == pa.string()
    assert schema.field("observationDomainId").type == pa.uint32()
    assert schema.field("templateId").type == pa.uint16()
    # Contract: Timestamp(Second, "UTC"). Parquet has no second unit, so the
    # column is stored in milliseconds; pyarrow restores only the time zone
    # from ARROW:schema (observed with pyarrow 26), so accept both units
    # and check the instants below.
    assert schema.field("exportTime").type in (TS_S, TS_MS)
    assert schema.field("sourceIPv4Address").type == pa.string()
    assert schema.field("packetDeltaCount").type == pa.uint64()
    assert schema.field("octetDeltaCount").type == pa.uint64()
    assert schema.field("protocolIdentifier").type == pa.uint8()
    assert schema.field("ingressInterface").type == pa.uint32()
    assert schema.field("flowEndMilliseconds").type == TS_MS
    assert schema.field("pen32473_ie7").type == pa.binary()
    assert schema.field("ingressInterfaceName").type == pa.string()
    # Field metadata names the element (columnar module docs).
    meta = schema.field("pen32473_ie7").metadata
    assert meta[b"ipfix.enterpriseNumber"] == b"32473" and meta[b"ipfix.elementId"] == b"7"
    assert schema.metadata[b"flowsift.table"] == b"flows"
    rows = sorted(table.to_pylist(), key=lambda r: r["packetDeltaCount"])
    want = expected_rows(ks)
    assert len(rows) == len(want)
    for got, exp in zip(rows, want):
        for col in ["sourceIPv4Address", "destinationIPv4Address", "packetDeltaCount", "octetDeltaCount", "protocolIdentifier", "ingressInterface", "pen32473_ie7"]:
            assert got[col] == exp[col], (col, got, exp)
        assert int(got["flowEndMilliseconds"].timestamp() * 1000) == exp["flowEndMilliseconds"]
        assert got["exporter"] == exporter
        assert got["observationDomainId"] == domain
        assert got["templateId"] == ix.FLOW_TEMPLATE_ID
        assert got["exportTime"].timestamp() == int(got["exportTime"].timestamp()) >= ix.T0
        if names:
            assert got["ingressInterfaceName"] == ix.IF_NAMES[exp["ingressInterface"]]
    return table


def check_accounting(stats, decoded, skipped=0, gap=0, malformed=0):
    assert stats["recordsDecoded"] == decoded, stats
    assert stats["recordsSkipped"] == skipped, stats
    assert stats["sequenceGapRecords"] == gap, stats
    assert stats["messagesMalformed"] == malformed, stats
    assert stats["recordsWritten"] == decoded
    assert stats["output"]["flows"]["rows"] + stats["output"]["options"]["rows"] == decoded


# ---------------------------------------------------------------- inputs


def test_classic_pcap_ethernet_udp(tmp_path):
    exp = ix.Exporter(7)
    msgs = ix.flow_stream(exp, 250, 30)
    # Noise that is not IPFIX: ARP and a DNS-looking UDP datagram.
    mac = dict(src="00:00:5e:00:53:01", dst="00:00:5e:00:53:02")
    noise = [Ether(**mac) / ARP(psrc="192.0.2.2", pdst="192.0.2.3"), Ether(**mac) / IP(src="192.0.2.2", dst="192.0.2.53") / UDP(sport=5353, dport=53) / Raw(b"\x12\x34" * 10)]
    cap = tmp_path / "a.pcap"
    wrpcap(str(cap), udp_packets(msgs)[:3] + noise + udp_packets(msgs)[3:])
    proc, out, stats = convert(tmp_path, cap)
    # Not a terminal: no progress bar, only the summary.
    assert b"pass 1/2" not in proc.stderr and b"records decoded" in proc.stderr
    check_flows_table(out, range(250))
    check_accounting(stats, 250 + 3)
    assert stats["optionsRecordsDecoded"] == 3
    # Non-IPFIX packets are not records: counted under capture.
    assert stats["capture"]["packetsSkippedByReason"].get("not-ip") == 1
    assert stats["capture"]["packetsSkippedByReason"].get("not-ipfix") == 1
    assert stats["inputs"][0]["format"] == "pcap"
    # Options table beside OUT (pyarrow).
    opts = pq.read_table(tmp_path / "flows.options.parquet")
    assert opts.schema.metadata[b"flowsift.table"] == b"options"
    assert opts.schema.field("scopeFields").type == pa.list_(pa.string())
    assert sorted((r["ingressInterface"], r["interfaceName"]) for r in opts.to_pylist()) == sorted(ix.IF_NAMES.items())
    # Default codec zstd (Parquet column chunk metadata, pyarrow).
    md = pq.ParquetFile(out).metadata
    assert md.row_group(0).column(0).compression == "ZSTD"


def test_pcapng_vlan_ipv6(tmp_path):
    exp = ix.Exporter(9)
    msgs = ix.flow_stream(exp, 90, 20)
    cap = tmp_path / "b.pcapng"
    wrpcapng(str(cap), udp_packets(msgs, src=EXPORTER6, dst=COLLECTOR6, link="vlan"))
    _, out, stats = convert(tmp_path, cap)
    check_flows_table(out, range(90), exporter=EXPORTER6, domain=9)
    check_accounting(stats, 93)
    assert stats["inputs"][0]["format"] == "pcapng"
    assert stats["exporters"][0]["exporter"] == f"[{EXPORTER6}]:50000"


def test_linux_cooked_capture(tmp_path):
    exp = ix.Exporter(7)
    msgs = ix.flow_stream(exp, 40, 10)
    cap = tmp_path / "sll.pcap"
    wrpcap(str(cap), udp_packets(msgs, link="sll"))
    _, out, stats = convert(tmp_path, cap)
    check_flows_table(out, range(40))
    check_accounting(stats, 43)


@pytest.mark.parametrize("link,linktype", [("raw", 101), ("loopback", 0)])
def test_raw_ip_and_loopback_link_types(tmp_path, link, linktype):
    # LINKTYPE_RAW (101) and BSD loopback / DLT_NULL (0) (link-type numbers
    # from memory, unconfirmed; scapy writes the headers).
    exp = ix.Exporter(7)
    msgs = ix.flow_stream(exp, 30, 10)
    cap = tmp_path / f"{link}.pcap"
    wrpcap(str(cap), udp_packets(msgs, link=link), linktype=linktype)
    _, out, stats = convert(tmp_path, cap)
    check_flows_table(out, range(30))
    check_accounting(stats, 33)


def test_ipv6_fragmentation(tmp_path):
    # IPv6 Fragment extension header (scapy's fragment6), pcapng container.
    exp = ix.Exporter(9)
    msgs = ix.flow_stream(exp, 200, 100)
    pkts = []
    for i, m in enumerate(msgs):
        whole = IPv6(src=EXPORTER6, dst=COLLECTOR6) / IPv6ExtHdrFragment(id=77 + i) / UDP(sport=50000, dport=4739) / Raw(m)
        frags = fragment6(whole, 1280)
        assert len(frags) >= 3
        for j, f in enumerate(frags):
            p = Ether(**MAC) / f
            p.time = ix.T0 + i + j * 0.001
            pkts.append(p)
    cap = tmp_path / "frag6.pcapng"
    wrpcapng(str(cap), pkts)
    _, out, stats = convert(tmp_path, cap)
    check_flows_table(out, range(200), exporter=EXPORTER6, domain=9)
    check_accounting(stats, 203)
    assert stats["capture"]["fragmentsReassembled"] == len(msgs)


def test_ip_fragmentation_out_of_order(tmp_path):
    # One 4,000-octet message in 1,400-octet IPv4 fragments (scapy's
    # fragment()), sent last fragment first.
    exp = ix.Exporter(7)
    msgs = ix.flow_stream(exp, 300, 100)
    assert len(msgs[0]) > 3000
    pkts = []
    for i, m in enumerate(msgs):
        frags = fragment(IP(src=EXPORTER, dst=COLLECTOR, id=1000 + i) / UDP(sport=50000, dport=4739) / Raw(m), fragsize=1400)
        assert len(frags) >= 3
        for j, f in enumerate(reversed(frags)):
            p = Ether(**MAC) / f
            p.time = ix.T0 + i + j * 0.001
            pkts.append(p)
    cap = tmp_path / "frag.pcap"
    wrpcap(str(cap), pkts)
    _, out, stats = convert(tmp_path, cap)
    check_flows_table(out, range(300))
    check_accounting(stats, 303)
    assert stats["capture"]["fragmentsReassembled"] == len(msgs)


def tcp_packets(stream, seg=700, retransmit=True, fin=True):
    """A TCP connection exporter→collector carrying `stream`, cut every
    `seg` octets (messages straddle segments), with a handshake, one
    retransmitted segment and a FIN."""
    c, s = (EXPORTER, 40000), (COLLECTOR, 4739)
    isn, risn = 1000, 5000
    t = [ix.T0]

    def pkt(src, dst, flags, seq, ack, payload=b""):
        p = Ether(**MAC) / IP(src=src[0], dst=dst[0]) / TCP(sport=src[1], dport=dst[1], flags=flags, seq=seq, ack=ack) / Raw(payload)
        if not payload:
            p = Ether(**MAC) / IP(src=src[0], dst=dst[0]) / TCP(sport=src[1], dport=dst[1], flags=flags, seq=seq, ack=ack)
        t[0] += 0.001
        p.time = t[0]
        return p

    pkts = [pkt(c, s, "S", isn, 0), pkt(s, c, "SA", risn, isn + 1), pkt(c, s, "A", isn + 1, risn + 1)]
    off = 0
    while off < len(stream):
        chunk = stream[off:off + seg]
        pkts.append(pkt(c, s, "PA", isn + 1 + off, risn + 1, chunk))
        if retransmit and off == seg:
            pkts.append(pkt(c, s, "PA", isn + 1 + off, risn + 1, chunk))
        off += len(chunk)
    if fin:
        pkts.append(pkt(c, s, "FA", isn + 1 + off, risn + 1))
    return pkts


def test_tcp_stream(tmp_path):
    exp = ix.Exporter(7)
    msgs = ix.flow_stream(exp, 200, 25)
    cap = tmp_path / "tcp.pcap"
    wrpcap(str(cap), tcp_packets(b"".join(msgs)))
    _, out, stats = convert(tmp_path, cap)
    check_flows_table(out, range(200))
    check_accounting(stats, 203)
    assert stats["capture"]["tcpSessions"] == 1
    assert stats["exporters"][0]["transport"] == "tcp"


def test_rfc5655_file_and_stdin(tmp_path):
    exp = ix.Exporter(7)
    data = b"".join(ix.flow_stream(exp, 120, 40))
    f = tmp_path / "export.ipfix"
    f.write_bytes(data)
    _, out, stats = convert(tmp_path, f)
    check_flows_table(out, range(120), exporter=None)
    check_accounting(stats, 123)
    assert stats["inputs"][0]["format"] == "ipfix-file"
    assert stats["exporters"][0]["transport"] == "file"
    # The same bytes through standard input ('-').
    out2 = tmp_path / "stdin.parquet"
    proc = run("convert", "-", "-o", out2, "--stats-json", "-", stdin=data)
    assert proc.returncode == 0, proc.stderr.decode()
    stats2 = json.loads(proc.stdout)
    assert stats2["inputs"][0]["path"] == "<stdin>"
    check_flows_table(out2, range(120), exporter=None)


def test_several_inputs_share_udp_templates(tmp_path):
    # A capture split in two files: the template is only in the first.
    exp = ix.Exporter(7)
    msgs = ix.flow_stream(exp, 100, 10)
    pkts = udp_packets(msgs)
    a, b = tmp_path / "part-1.pcap", tmp_path / "part-2.pcapng"
    wrpcap(str(a), pkts[:4])
    wrpcapng(str(b), pkts[4:])
    ipfix_file = tmp_path / "other.ipfix"
    ipfix_file.write_bytes(b"".join(ix.flow_stream(ix.Exporter(8), 10, 10, start=100)))
    _, out, stats = convert(tmp_path, a, b, ipfix_file)
    check_accounting(stats, 100 + 3 + 10 + 3)
    assert [i["format"] for i in stats["inputs"]] == ["pcap", "pcapng", "ipfix-file"]
    # Each session names the input where it was first seen.
    assert [(e["transport"], e["input"]) for e in stats["exporters"]] == [("udp", str(a)), ("file", str(ipfix_file))]
    # DuckDB: records per exporter/domain and packet sums from the formula.
    con = duckdb.connect()
    got = con.execute(
        f"SELECT exporter, observationDomainId, count(*), sum(packetDeltaCount) FROM read_parquet('{out}') GROUP BY ALL ORDER BY 2"
    ).fetchall()
    assert got == [
        (EXPORTER, 7, 100, sum(100 + k for k in range(100))),
        (None, 8, 10, sum(100 + k for k in range(100, 110))),
    ]


# ------------------------------------------------------- damage and loss


def test_sequence_gaps(tmp_path):
    # Messages 3 and 6 (10 records each) never reach the capture.
    exp = ix.Exporter(7)
    msgs = ix.flow_stream(exp, 100, 10)
    kept = [m for i, m in enumerate(msgs) if i not in (3, 6)]
    cap = tmp_path / "gaps.pcap"
    wrpcap(str(cap), udp_packets(kept))
    _, out, stats = convert(tmp_path, cap)
    ks = [k for k in range(100) if k // 10 not in (3, 6)]
    check_flows_table(out, ks)
    check_accounting(stats, 80 + 3, gap=20)
    dom = stats["exporters"][0]["domains"][0]
    assert dom["sequenceGapRecords"] == 20 and dom["observationDomainId"] == 7


def test_malformed_message_amid_good_ones(tmp_path):
    exp = ix.Exporter(7)
    msgs = ix.flow_stream(exp, 60, 10)
    # Message 3 keeps its header but its Data Set claims more octets than
    # the message has (RFC 7011 section 9.1: discard the whole message).
    bad = bytearray(msgs[3])
    bad[16 + 2:16 + 4] = (4000).to_bytes(2, "big")
    msgs[3] = bytes(bad)
    cap = tmp_path / "bad.pcap"
    wrpcap(str(cap), udp_packets(msgs))
    _, out, stats = convert(tmp_path, cap)
    ks = [k for k in range(60) if k // 10 != 3]
    check_flows_table(out, ks)
    # Its 10 records are skipped for that reason, not counted as loss.
    check_accounting(stats, 50 + 3, skipped=10, gap=0, malformed=1)
    assert stats["recordsSkippedByReason"] == {"malformed-message": 10}
    assert stats["malformedByReason"] == {"bad-set-length": 1}
    # --strict: exit 1 and nothing written.
    proc, _, _ = convert(tmp_path, cap, extra=["--strict"], name="strict.parquet", expect=1)
    assert b"IPFIX message #4" in proc.stderr and b"nothing was written" in proc.stderr
    assert not (tmp_path / "strict.parquet").exists()
    assert not (tmp_path / "strict.options.parquet").exists()


def test_data_before_template_and_template_never_sent(tmp_path):
    exp = ix.Exporter(7)
    # First message: data only (template not yet known); second: template
    # and more data. RFC 7011 section 9.3: buffered, decoded later.
    early = exp.message([ix.data_set(256, [ix.flow_record(k) for k in range(5)])], ix.T0, data_records=5)
    later = exp.message(
        [ix.template_set([(256, ix.FLOW_FIELDS)]), ix.data_set(256, [ix.flow_record(k) for k in range(5, 10)])], ix.T0 + 1, data_records=5
    )
    # Another domain whose template never comes: 4 records, known only
    # from its next Sequence Number.
    other = ix.Exporter(8)
    orphan = other.message([ix.data_set(300, [b"\x00" * 8] * 4)], ix.T0, data_records=4)
    after = other.message([], ix.T0 + 1)
    cap = tmp_path / "order.pcap"
    wrpcap(str(cap), udp_packets([early, later, orphan, after]))
    _, out, stats = convert(tmp_path, cap)
    check_flows_table(out, range(10), names=False)
    check_accounting(stats, 10, skipped=4)
    assert stats["recordsSkippedByReason"] == {"template-never-arrived": 4}
    assert stats["setsSkippedByReason"] == {"template-never-arrived": 1}
    assert any("never found their template" in w for w in stats["warnings"])


def test_truncated_capture(tmp_path):
    exp = ix.Exporter(7)
    msgs = ix.flow_stream(exp, 50, 10)
    cap = tmp_path / "cut.pcap"
    wrpcap(str(cap), udp_packets(msgs))
    data = cap.read_bytes()
    cut = len(data) - 40  # inside the last packet
    cap.write_bytes(data[:cut])
    proc, out, stats = convert(tmp_path, cap)
    check_flows_table(out, range(40))
    assert stats["inputs"][0]["stoppedEarly"]["offset"] is not None
    assert stats["inputs"][0]["stoppedEarly"]["offset"] <= cut
    assert b"truncated" in proc.stderr


def test_unknown_and_missing_inputs(tmp_path):
    text = tmp_path / "notes.txt"
    text.write_text("not a capture at all\n")
    proc = run("convert", text, "-o", tmp_path / "x.parquet")
    assert proc.returncode == 2
    err = proc.stderr.decode()
    assert str(text) in err and "looks like text" in err and "6e 6f 74" in err
    missing = tmp_path / "missing.pcap"
    proc = run("convert", missing, "-o", tmp_path / "x.parquet")
    assert proc.returncode == 2 and str(missing) in proc.stderr.decode()
    assert not (tmp_path / "x.parquet").exists()


# ------------------------------------------------------- options and help


def test_codec_and_row_groups(tmp_path):
    exp = ix.Exporter(7)
    cap = tmp_path / "rg.pcap"
    wrpcap(str(cap), udp_packets(ix.flow_stream(exp, 1000, 50)))
    _, out, stats = convert(tmp_path, cap, extra=["--compression", "snappy", "--row-group-rows", "300"])
    pf = pq.ParquetFile(out)
    assert pf.metadata.num_rows == 1000
    assert pf.metadata.num_row_groups == 4  # 300+300+300+100
    assert pf.metadata.row_group(0).column(0).compression == "SNAPPY"
    assert stats["output"]["flows"]["rowGroups"] == 4


def test_help_teaches():
    proc = run("convert", "--help")
    assert proc.returncode == 0
    text = proc.stdout.decode()
    assert "Examples:" in text and "--stats-json" in text and ".options.parquet" in text
    proc = run("inspect", "--help")
    assert proc.returncode == 0 and "Examples:" in proc.stdout.decode()


# ---------------------------------------------------------------- inspect


def test_inspect_templates_withdrawal_and_redefinition(tmp_path):
    # Over TCP, withdrawals count (RFC 7011 section 8.1): template 256 is
    # used, withdrawn, then defined again with other fields.
    exp = ix.Exporter(7)
    m1 = exp.message([ix.template_set([(256, ix.FLOW_FIELDS)]), ix.data_set(256, [ix.flow_record(k) for k in range(6)])], ix.T0, data_records=6)
    m2 = exp.message([ix.withdrawal_set([256])], ix.T0 + 1)
    short = [ix.field(8, 4), ix.field(2, 4)]
    m3 = exp.message(
        [ix.template_set([(256, short)]), ix.data_set(256, [ix.ipv4("192.0.2.77") + (9).to_bytes(4, "big")] * 3)], ix.T0 + 2, data_records=3
    )
    m4 = exp.message([ix.options_template_set([(ix.IFNAME_TEMPLATE_ID, [ix.field(10, 4)], [ix.field(82, ix.VARIABLE)])])], ix.T0 + 3)
    cap = tmp_path / "tpl.pcap"
    wrpcap(str(cap), tcp_packets(m1 + m2 + m3 + m4, seg=50, retransmit=False))
    proc = run("inspect", cap, "--format", "json")
    assert proc.returncode == 0, proc.stderr.decode()
    rep = json.loads(proc.stdout)
    dom = rep["exporters"][0]["domains"][0]
    assert dom["observationDomainId"] == 7 and dom["recordsDecoded"] == 9
    assert dom["recordsByTemplate"] == {"256": 9}
    t256 = [t for t in dom["templates"] if t["templateId"] == 256]
    assert [t["version"] for t in t256] == [1, 2]
    assert t256[0]["records"] == 6 and t256[1]["records"] == 3
    assert t256[0]["withdrawnAt"]["message"] == 2
    assert t256[1]["definedAt"]["message"] == 3
    f = t256[0]["fields"]
    assert [x["name"] for x in f][:3] == ["sourceIPv4Address", "destinationIPv4Address", "packetDeltaCount"]
    assert f[2] == {"name": "packetDeltaCount", "elementId": 2, "enterpriseNumber": None, "dataType": "unsigned64", "length": 8, "scope": False, "lengthMismatch": False}
    assert f[7]["enterpriseNumber"] == ix.PEN and f[7]["name"] == "pen32473_ie7"
    opt = [t for t in dom["templates"] if t["templateId"] == ix.IFNAME_TEMPLATE_ID][0]
    assert opt["kind"] == "options" and opt["scopeFieldCount"] == 1
    assert opt["fields"][1]["length"] is None  # variable length (RFC 7011 section 7)
    assert rep["totals"]["templates"]["withdrawn"] == 1
    assert rep["firstExportTime"] == "2026-11-30T01:00:00Z"
    # The human table names the same things.
    proc = run("inspect", cap)
    text = proc.stdout.decode()
    assert proc.returncode == 0
    assert "TEMPLATE 256 v1" in text and "withdrawn at message #2" in text and "interfaceName" in text


def test_inspect_loss_and_malformed(tmp_path):
    exp = ix.Exporter(7)
    msgs = ix.flow_stream(exp, 60, 10)
    bad = bytearray(msgs[2])
    bad[16 + 2:16 + 4] = (3).to_bytes(2, "big")  # set length below 4
    msgs[2] = bytes(bad)
    del msgs[4]
    cap = tmp_path / "lm.pcap"
    wrpcap(str(cap), udp_packets(msgs))
    proc = run("inspect", cap, "--format", "json")
    assert proc.returncode == 0, proc.stderr.decode()
    rep = json.loads(proc.stdout)
    dom = rep["exporters"][0]["domains"][0]
    assert dom["messagesMalformed"] == 1 and dom["malformedByReason"] == {"bad-set-length": 1}
    assert dom["sequenceGapRecords"] == 10
    assert dom["recordsSkipped"] == 10
    assert dom["recordsDecoded"] == 40 + 3
    assert rep["exporters"][0]["exporter"] == f"{EXPORTER}:50000"
    # The bad message is located: input, message number, reason, offset.
    ex = rep["malformedExamples"]
    assert len(ex) == 1 and ex[0]["message"] == 3 and ex[0]["reason"] == "bad-set-length"
    assert ex[0]["input"] == str(cap) and ex[0]["observationDomainId"] == 7
    assert "offset 16" in ex[0]["detail"]
    text = run("inspect", cap).stdout.decode()
    assert "MALFORMED MESSAGES" in text and "message #3" in text
    assert rep["exporters"][0]["collector"] == f"{COLLECTOR}:4739"
