"""Reads the columnar writer's Parquet back with a general-purpose reader.

Reference reader: pyarrow (PyPI `pyarrow`). The files come from the example
`ipfix-core/examples/columnar_fixture.rs`, which encodes a small capture
whose every value is listed in its header, decodes it with the project's
decoder and writes it with `ipfix_core::columnar`. Expected values below
are computed by hand from that listing and the cited RFC/IANA text, not
taken from our output.

Run: `pytest tests/py/test_columnar_pyarrow.py`. The example is built with
cargo first (CARGO_TARGET_DIR defaults to /var/tmp/flowsift-target), or
taken from $FLOWSIFT_COLUMNAR_FIXTURE.
"""

import base64
import json
import os
import subprocess
from datetime import datetime, timedelta, timezone
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

REPO = Path(__file__).resolve().parents[2]
UTC = timezone.utc
EXPORT_TIME = datetime(2025, 12, 2, 0, 0, 0, tzinfo=UTC)  # 1,764,633,600 s
INIT = datetime(2025, 12, 1, 23, 0, 0, tzinfo=UTC)  # 1,764,630,000,000 ms


def fixture_binary() -> Path:
    explicit = os.environ.get("FLOWSIFT_COLUMNAR_FIXTURE")
    if explicit:
        return Path(explicit)
    target = Path(os.environ.get("CARGO_TARGET_DIR", "/var/tmp/flowsift-target"))
    subprocess.run(
        ["cargo", "build", "--quiet", "-p", "ipfix-core", "--features", "columnar",
         "--example", "columnar_fixture"],
        cwd=REPO, check=True,
        env={**os.environ, "CARGO_TARGET_DIR": str(target)},
    )
    return target / "debug" / "examples" / "columnar_fixture"


@pytest.fixture(scope="module")
def written(tmp_path_factory):
    out = tmp_path_factory.mktemp("columnar") / "flows.parquet"
    run = subprocess.run([str(fixture_binary()), str(out)], check=True,
                         capture_output=True, text=True)
    report = json.loads(run.stdout)
    return out, Path(f"{out}.options.parquet"), report


@pytest.fixture(scope="module")
def flows(written):
    return pq.read_table(written[0])


@pytest.fixture(scope="module")
def options(written):
    return pq.read_table(written[1])


def pyarrow_round_trip_type(t: pa.DataType) -> pa.DataType:
    """The type pyarrow itself reads back after writing a column of type t."""
    sink = pa.BufferOutputStream()
    pq.write_table(pa.table({"x": pa.array([0], t)}), sink)
    return pq.read_table(pa.BufferReader(sink.getvalue())).schema.field("x").type


DERIVED = [
    "forwardingOutcome", "forwardingReason", "mplsLabelStack", "flowStartTime",
    "flowEndTime", "samplingRate", "ingressInterfaceName", "egressInterfaceName",
    "ingressVRFname", "egressVRFname", "srhEndpointBehaviorName",
]


def test_column_names_follow_the_contract(flows):
    # Provenance, then IANA names in first-appearance order (template 256,
    # then 257), enterprise as pen{PEN}_ie{ID}, then the derived columns.
    assert flows.column_names == [
        "exporter", "observationDomainId", "templateId", "exportTime",
        "sourceIPv4Address", "destinationIPv4Address", "ingressInterface",
        "egressInterface", "ingressVRFID", "packetDeltaCount", "octetDeltaCount",
        "flowStartSysUpTime", "flowEndSysUpTime", "forwardingStatus",
        "mplsTopLabelStackSection", "mplsLabelStackSection2", "samplerId",
        "bgpSourceAsNumber",
        "sourceIPv6Address", "destinationIPv6Address", "flowStartSeconds",
        "flowStartMilliseconds", "flowEndMilliseconds", "srhSegmentIPv6EndpointBehavior",
        "srhSegmentIPv6BasicList", "pen32473_ie1", "sourceMacAddress",
    ] + DERIVED


def test_arrow_types(flows):
    s = flows.schema
    ms_utc = pa.timestamp("ms", tz="UTC")
    # Parquet has no seconds unit; pyarrow reads its own timestamp[s] column
    # back as timestamp[ms, tz=UTC], and ours the same way.
    assert pyarrow_round_trip_type(pa.timestamp("s", tz="UTC")) == ms_utc
    expected = {
        "exporter": pa.string(),
        "observationDomainId": pa.uint32(),
        "templateId": pa.uint16(),
        "exportTime": ms_utc,                       # Timestamp(Second, UTC) stored as ms
        "flowStartSeconds": ms_utc,                 # dateTimeSeconds, same
        "sourceIPv4Address": pa.string(),           # ipv4Address -> Utf8
        "ingressInterface": pa.uint32(),            # unsigned32
        "packetDeltaCount": pa.uint64(),            # unsigned64 sent in 4 octets widens (RFC 7011 §6.2)
        "forwardingStatus": pa.uint32(),            # unsigned32 sent in 1 and 4 octets
        "mplsTopLabelStackSection": pa.binary(),    # octetArray
        "samplerId": pa.uint8(),                    # unsigned8
        "sourceIPv6Address": pa.string(),
        "flowStartMilliseconds": ms_utc,            # dateTimeMilliseconds
        "srhSegmentIPv6EndpointBehavior": pa.uint16(),
        "srhSegmentIPv6BasicList": pa.list_(pa.string()),  # basicList of ipv6Address
        "pen32473_ie1": pa.binary(),                # enterprise element
        "sourceMacAddress": pa.string(),            # macAddress -> Utf8
        "forwardingOutcome": pa.string(),
        "forwardingReason": pa.string(),
        "mplsLabelStack": pa.list_(pa.uint32()),
        "flowStartTime": pa.timestamp("ns", tz="UTC"),
        "flowEndTime": pa.timestamp("ns", tz="UTC"),
        "samplingRate": pa.uint32(),
        "ingressInterfaceName": pa.string(),
        "ingressVRFname": pa.string(),
        "srhEndpointBehaviorName": pa.string(),
    }
    for name, t in expected.items():
        assert s.field(name).type == t, name


def test_embedded_arrow_schema_and_metadata(written, flows):
    meta = pq.read_metadata(written[0]).metadata
    assert b"ARROW:schema" in meta
    assert meta[b"flowsift.table"] == b"flows"
    assert meta[b"flowsift.contract"] == b"1"
    # The embedded schema (Arrow IPC, base64) keeps the contract's seconds.
    embedded = pa.ipc.read_schema(pa.py_buffer(base64.b64decode(meta[b"ARROW:schema"])))
    assert embedded.field("exportTime").type == pa.timestamp("s", tz="UTC")
    assert embedded.field("flowStartSeconds").type == pa.timestamp("s", tz="UTC")
    # Field metadata names the element (IANA ids 89 and enterprise 32473/1).
    f = flows.schema.field("forwardingStatus")
    assert f.metadata[b"ipfix.elementId"] == b"89"
    assert f.metadata[b"ipfix.dataType"] == b"unsigned32"
    e = flows.schema.field("pen32473_ie1")
    assert e.metadata[b"ipfix.enterpriseNumber"] == b"32473"
    # Default compression is zstd.
    rg = pq.ParquetFile(written[0]).metadata.row_group(0)
    assert rg.column(0).compression == "ZSTD"


def test_values(flows):
    rows = flows.to_pylist()
    assert len(rows) == 3
    r1, r2, r3 = rows
    for r in rows:
        assert r["exporter"] == "192.0.2.1"
        assert r["observationDomainId"] == 7
        assert r["exportTime"] == EXPORT_TIME
    assert [r["templateId"] for r in rows] == [256, 256, 257]
    assert (r1["sourceIPv4Address"], r1["destinationIPv4Address"]) == ("192.0.2.10", "198.51.100.20")
    assert (r1["packetDeltaCount"], r1["octetDeltaCount"]) == (5, 1500)
    assert r1["forwardingStatus"] == 0x81
    assert r1["mplsTopLabelStackSection"] == bytes([0x03, 0xE8, 0x40])
    assert r1["bgpSourceAsNumber"] == 64512
    # Template 257's columns are null on template 256's rows and back.
    assert r1["sourceIPv6Address"] is None and r3["sourceIPv4Address"] is None
    # RFC 5952 text for IPv6.
    assert (r3["sourceIPv6Address"], r3["destinationIPv6Address"]) == ("2001:db8::1", "2001:db8:0:1::2")
    assert r3["flowStartSeconds"] == EXPORT_TIME - timedelta(seconds=1)
    assert r3["flowEndMilliseconds"] == EXPORT_TIME - timedelta(milliseconds=250)
    assert r3["srhSegmentIPv6BasicList"] == ["2001:db8::a", "2001:db8::b"]
    assert r3["pen32473_ie1"] == bytes.fromhex("deadbeef")
    assert r3["sourceMacAddress"] == "00:1b:2c:3d:4e:fa"
    assert r3["forwardingStatus"] == 0x83  # 4-octet field, meaningful octet last (RFC 7270 §4.12)


def test_derived_columns(flows):
    t = flows.to_pydict()
    # IANA "Forwarding Status (Value 89)": 0x81 Dropped/ACL deny, 0x40
    # Forwarded/Unknown, 0x83 Dropped/Unroutable.
    assert t["forwardingOutcome"] == ["dropped", "forwarded", "dropped"]
    assert t["forwardingReason"] == ["acl-deny", "unknown", "unroutable"]
    # RFC 3032 §2.1 entries 03 E8 40 = label 16004, 05 DC 11 = label 24001
    # with bottom of stack; all-zero sections = no entry; no sections = null.
    assert t["mplsLabelStack"] == [[16004, 24001], [], None]
    # sysUpTime + systemInitTimeMilliseconds from the options record (IANA
    # IE 22/21/160); r3 from flowStart/EndMilliseconds (152/153), preferred
    # over flowStartSeconds (150).
    assert t["flowStartTime"][0] == INIT + timedelta(milliseconds=1000)
    assert t["flowEndTime"][0] == INIT + timedelta(milliseconds=61000)
    assert t["flowStartTime"][1] == INIT + timedelta(milliseconds=2000)
    assert t["flowStartTime"][2] == EXPORT_TIME - timedelta(seconds=1)
    assert t["flowEndTime"][2] == EXPORT_TIME - timedelta(milliseconds=250)
    # samplerId 1 -> samplingInterval 1000 (options); r3 names no sampler and
    # gets the exporter's one rate.
    assert t["samplingRate"] == [1000, 1000, 1000]
    assert t["ingressInterfaceName"] == ["xe-0/0/3", "xe-0/0/4", None]
    assert t["egressInterfaceName"] == ["xe-0/0/4", "xe-0/0/3", None]
    assert t["ingressVRFname"] == ["blue", None, None]  # VRF 11 has no name
    assert t["egressVRFname"] == [None, None, None]
    # IANA "SRv6 Endpoint Behaviors": 5 = End.X.
    assert t["srhEndpointBehaviorName"] == [None, None, "End.X"]


def test_options_table(options):
    assert options.column_names[:5] == [
        "exporter", "observationDomainId", "templateId", "exportTime", "scopeFields"]
    assert options.schema.field("scopeFields").type == pa.list_(pa.string())
    t = options.to_pydict()
    assert t["templateId"] == [300, 300, 301, 302, 303]
    assert t["scopeFields"] == [["ingressInterface"], ["ingressInterface"], ["samplerId"],
                                ["ingressVRFID"], ["exportingProcessId"]]
    assert t["interfaceName"] == ["xe-0/0/3", "xe-0/0/4", None, None, None]
    assert t["samplingInterval"] == [None, None, 1000, None, None]
    assert t["systemInitTimeMilliseconds"][4] == INIT
    assert options.schema.field("systemInitTimeMilliseconds").type == pa.timestamp("ms", tz="UTC")


def test_counters(written):
    report = written[2]
    assert report["flows"] == {"rows": 3, "rowGroups": 1}
    assert report["options"] == {"rows": 5, "rowGroups": 1}
    stats = report["stats"]
    assert stats["rows"] == 3
    for k, v in stats.items():
        if k not in ("rows", "sets"):
            assert v == 0, k
    assert report["enrichment"]["optionsRecordsUsed"] == 5
