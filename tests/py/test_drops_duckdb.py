"""Cross-checks `flowsift drops --format json` against DuckDB.

Fixtures are written with pyarrow using exactly the Arrow types of the
Parquet contract (UInt64 counters, UInt32 ids, Utf8 addresses,
Timestamp(ns/s, "UTC"), List<UInt32> label stacks, List<Utf8> segment
lists). The same figures are then computed independently with DuckDB SQL
over the same files (source of truth for every comparison below: DuckDB,
PyPI `duckdb`), from the measure definitions of the drops query:

  N = samplingRate when > 0, else 1
  t = coalesce(packetDeltaCount, packetTotalCount)
  k = t (else droppedPacketDeltaCount) when forwardingOutcome = 'dropped',
      else droppedPacketDeltaCount, else 0
  droppedPackets = sum(N*k), totalPackets = sum(N*coalesce(t, 0))
  var = sum(N*(N-1)*k); interval = est -/+ 1.96*sqrt(var), low >= sum(k)
  (Horvitz & Thompson 1952; RFC 5475 section 5.2.2.1 as the 1-in-N model)

Run: build the binary (`cargo build -p flowsift`), then `pytest tests/py`.
The binary is $FLOWSIFT_BIN, else $CARGO_TARGET_DIR/debug/flowsift with
CARGO_TARGET_DIR defaulting to /var/tmp/flowsift-target.
"""

import csv
import io
import json
import math
import os
import random
import subprocess
from datetime import datetime, timezone

import duckdb
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from flowsift_cli import flowsift_bin

T0 = int(datetime(2026, 11, 30, 1, 0, tzinfo=timezone.utc).timestamp())
Z_95 = 1.96

# Contract types (Arrow).
TS_NS = pa.timestamp("ns", tz="UTC")
TS_S = pa.timestamp("s", tz="UTC")
CONTRACT = {
    "packetDeltaCount": pa.uint64(),
    "octetDeltaCount": pa.uint64(),
    "packetTotalCount": pa.uint64(),
    "octetTotalCount": pa.uint64(),
    "droppedPacketDeltaCount": pa.uint64(),
    "droppedOctetDeltaCount": pa.uint64(),
    "forwardingStatus": pa.uint32(),
    "forwardingOutcome": pa.string(),
    "forwardingReason": pa.string(),
    "ipNextHopIPv4Address": pa.string(),
    "ipNextHopIPv6Address": pa.string(),
    "ingressInterface": pa.uint32(),
    "ingressInterfaceName": pa.string(),
    "mplsLabelStack": pa.list_(pa.uint32()),
    "mplsTopLabelType": pa.uint8(),
    "srhSegmentIPv6BasicList": pa.list_(pa.string()),
    "bgpNextAdjacentAsNumber": pa.uint32(),
    "ingressVRFID": pa.uint32(),
    "ingressVRFname": pa.string(),
    "protocolIdentifier": pa.uint8(),
    "exporter": pa.string(),
    "observationDomainId": pa.uint32(),
    "templateId": pa.uint16(),
    "exportTime": TS_S,
    "flowStartTime": TS_NS,
    "flowEndTime": TS_NS,
    "samplingRate": pa.uint32(),
}

# DuckDB types for typed-null stand-ins of absent contract columns.
DUCK_TYPES = {
    "uint64": "UBIGINT",
    "uint32": "UINTEGER",
    "uint16": "USMALLINT",
    "uint8": "UTINYINT",
    "string": "VARCHAR",
    "timestamp[ns, tz=UTC]": "TIMESTAMPTZ",
    "timestamp[s, tz=UTC]": "TIMESTAMPTZ",
}

MEASURES = [
    "droppedPackets",
    "droppedOctets",
    "totalPackets",
    "totalOctets",
    "dropRatio",
    "flowRecords",
    "droppedPacketsLow",
    "droppedPacketsHigh",
]

IF_NAMES = {1: "xe-0/0/1", 2: "xe-0/0/2", 3: "et-1/0/0"}
VRF_NAMES = {10: "cust-blue", 20: "cust-green"}
STACKS = [[16005, 24001, 3], [16007, 24002], [16005]]
SEGMENTS = [
    ["2001:db8:0:3::", "2001:db8:0:2::", "2001:db8:0:1::"],
    ["2001:db8:0:9::", "2001:db8:0:1::"],
]
DROP_REASONS = ["acl-deny", "unroutable", "adjacency", "bad-ttl"]



def run_flowsift(*args, fmt="json"):
    binary = flowsift_bin()
    assert os.path.exists(binary), f"{binary} missing: run `cargo build -p flowsift` first"
    proc = subprocess.run(
        [binary, "drops", *map(str, args), "--format", fmt],
        capture_output=True,
        text=True,
        check=False,
    )
    assert proc.returncode == 0, proc.stderr
    return proc.stdout


def make_rows(rng, n, rates):
    """n random records; `rates` picks samplingRate per record (or None)."""
    rows = []
    for _ in range(n):
        packets = rng.randint(1, 5000)
        outcome = rng.choice(
            ["forwarded"] * 6 + ["dropped"] * 2 + ["consumed", "unknown", None]
        )
        dropped_delta = None
        reason = None
        if outcome == "dropped":
            reason = rng.choice(DROP_REASONS + [None])
        elif outcome == "forwarded" and rng.random() < 0.35:
            dropped_delta = rng.randint(0, packets)
            reason = rng.choice(["policer", "wred"])
        v4 = rng.choice(["198.51.100.1", "198.51.100.2", "203.0.113.9", None])
        iface = rng.choice([1, 2, 3, None])
        vrf = rng.choice([10, 20, None])
        end = T0 + rng.randint(0, 3599)
        end_ns = end * 1_000_000_000 + rng.randint(0, 999) * 1_000_000
        rows.append(
            {
                "packetDeltaCount": packets,
                "octetDeltaCount": packets * rng.randint(60, 1500),
                "droppedPacketDeltaCount": dropped_delta,
                "droppedOctetDeltaCount": None if dropped_delta is None else dropped_delta * 100,
                "forwardingStatus": None,
                "forwardingOutcome": outcome,
                "forwardingReason": reason,
                "ipNextHopIPv4Address": v4,
                "ipNextHopIPv6Address": None if v4 else "2001:db8:1::1",
                "ingressInterface": iface,
                "ingressInterfaceName": IF_NAMES.get(iface) if rng.random() < 0.8 else None,
                "mplsLabelStack": rng.choice(STACKS + [None]),
                "mplsTopLabelType": rng.choice([5, 8]),
                "srhSegmentIPv6BasicList": rng.choice(SEGMENTS + [None]),
                "bgpNextAdjacentAsNumber": rng.choice([64512, 64513, 65000, None]),
                "ingressVRFID": vrf,
                "ingressVRFname": VRF_NAMES.get(vrf),
                "protocolIdentifier": rng.choice([6, 17, 1]),
                "exporter": rng.choice(["192.0.2.1", "192.0.2.2", "2001:db8::a"]),
                "observationDomainId": rng.choice([1, 2]),
                "templateId": 256,
                "exportTime": end + rng.randint(1, 30),
                "flowStartTime": end_ns - 5_000_000_000,
                # A few records carry no flow end: time falls back to exportTime.
                "flowEndTime": None if rng.random() < 0.05 else end_ns,
                "samplingRate": rates(rng),
            }
        )
    return rows


def write_table(path, rows, columns):
    """Writes `columns` of `rows` with the contract's Arrow types."""
    arrays = []
    for name in columns:
        values = [r[name] for r in rows]
        arrays.append(pa.array(values, type=CONTRACT[name]))
    table = pa.Table.from_arrays(arrays, schema=pa.schema([(c, CONTRACT[c]) for c in columns]))
    path.parent.mkdir(parents=True, exist_ok=True)
    pq.write_table(table, path)
    return path


@pytest.fixture(scope="module")
def fixtures(tmp_path_factory):
    """Three files with different columns and sampling knowledge.

    a.parquet: every record sampled (1-in-100 or 1-in-1000);
    b.parquet: rate known for some records only;
    c.parquet: no samplingRate, no dropped-octet column, and running totals
               (packetTotalCount/octetTotalCount) instead of deltas.
    """
    rng = random.Random(20261130)
    root = tmp_path_factory.mktemp("drops")
    everything = list(CONTRACT)
    a = make_rows(rng, 700, lambda r: r.choice([100, 1000]))
    b = make_rows(rng, 500, lambda r: r.choice([10, None, None]))
    c = make_rows(rng, 300, lambda r: None)
    for row in c:
        row["packetTotalCount"] = row.pop("packetDeltaCount")
        row["octetTotalCount"] = row.pop("octetDeltaCount")
    for row in a + b:
        row["packetTotalCount"] = None
        row["octetTotalCount"] = None
    without_totals = [x for x in everything if x not in ("packetTotalCount", "octetTotalCount")]
    c_columns = [
        x
        for x in everything
        if x not in ("packetDeltaCount", "octetDeltaCount", "samplingRate", "droppedOctetDeltaCount")
    ]
    files = {
        "a": write_table(root / "a.parquet", a, without_totals),
        "b": write_table(root / "b.parquet", b, without_totals),
        "c": write_table(root / "c.parquet", c, c_columns),
    }
    # Unsampled only, for exact comparisons without scaling.
    d = make_rows(rng, 200, lambda r: None)
    files["d"] = write_table(root / "d.parquet", d, without_totals)
    return files


def duck_groups(files, dims, where=None, every_s=None, time_from=None, time_to=None, hive=False):
    """The drops figures per group, computed with DuckDB SQL.

    `dims` maps output column names to SQL expressions over the records.
    Returns {key tuple: {column: value}}.
    """
    paths = ", ".join(f"'{p}'" for p in files)
    hive_opts = ", hive_partitioning = true, hive_types_autocast = false" if hive else ""
    source = f"read_parquet([{paths}], union_by_name = true{hive_opts})"
    # A contract column that no file has reads as typed nulls (as in
    # flowsift); DuckDB would reject the name, so add it explicitly.
    con = duckdb.connect()
    present = {row[0] for row in con.execute(f"DESCRIBE SELECT * FROM {source}").fetchall()}
    missing = [
        f'NULL::{DUCK_TYPES[str(dtype)]} AS "{name}"'
        for name, dtype in CONTRACT.items()
        if name not in present and str(dtype) in DUCK_TYPES
    ]
    if missing:
        source = f"(SELECT *, {', '.join(missing)} FROM {source})"
    conditions = []
    if where:
        conditions.append(f"({where})")
    rec_time = "coalesce(flowEndTime, exportTime)"
    if time_from:
        conditions.append(f"{rec_time} >= TIMESTAMPTZ '{time_from}'")
    if time_to:
        conditions.append(f"{rec_time} < TIMESTAMPTZ '{time_to}'")
    where_sql = ("WHERE " + " AND ".join(conditions)) if conditions else ""
    keys = dict(dims)
    if every_s:
        keys = {"bucketStart": f"(epoch_ns({rec_time}) // {every_s * 10**9}) * {every_s}", **keys}
    key_select = ", ".join(f"{expr} AS \"{name}\"" for name, expr in keys.items())
    key_names = ", ".join(f'"{k}"' for k in keys)
    names_select = ""
    if "ingressInterface" in dims:
        names_select += ", max(ingressInterfaceName) AS ingressInterfaceName"
    if "ingressVRFID" in dims:
        names_select += ", max(ingressVRFname) AS ingressVRFname"
    reason_is_key = "forwardingReason" in dims
    # Group keys may be null: join on IS NOT DISTINCT FROM, not equality.
    join_on = " AND ".join(f'g."{k}" IS NOT DISTINCT FROM top."{k}"' for k in keys)
    sql = f"""
    WITH rec AS (
        SELECT *,
            CASE WHEN samplingRate > 0 THEN samplingRate ELSE 1 END::UBIGINT AS n,
            coalesce(packetDeltaCount, packetTotalCount) AS t,
            coalesce(octetDeltaCount, octetTotalCount) AS ot
        FROM {source} {where_sql}
    ), m AS (
        SELECT *, {key_select},
            CASE WHEN forwardingOutcome = 'dropped' THEN coalesce(t, droppedPacketDeltaCount, 0)
                 ELSE coalesce(droppedPacketDeltaCount, 0) END AS k,
            CASE WHEN forwardingOutcome = 'dropped' THEN coalesce(ot, droppedOctetDeltaCount, 0)
                 ELSE coalesce(droppedOctetDeltaCount, 0) END AS ko
        FROM rec
    ), per_reason AS (
        SELECT {key_names}{"" if reason_is_key else ", forwardingReason AS reason"},
            sum(n * k) AS dp
        FROM m GROUP BY ALL
    ), ranked AS (
        SELECT *, row_number() OVER (
            PARTITION BY {key_names} ORDER BY dp DESC, reason ASC NULLS LAST) AS rn,
            max(dp) OVER (PARTITION BY {key_names}) AS maxdp
        FROM per_reason
    ), top AS (
        SELECT {key_names}, CASE WHEN maxdp > 0 THEN reason END AS topReason
        FROM ranked WHERE rn = 1
    ), g AS (
        SELECT {key_names}{names_select},
            sum(n * k)::UBIGINT AS droppedPackets,
            sum(n * ko)::UBIGINT AS droppedOctets,
            sum(n * coalesce(t, 0))::UBIGINT AS totalPackets,
            sum(n * coalesce(ot, 0))::UBIGINT AS totalOctets,
            count(*)::UBIGINT AS flowRecords,
            sum(k)::DOUBLE AS sampled,
            sum(n::DOUBLE * (n::DOUBLE - 1) * k::DOUBLE) AS var
        FROM m GROUP BY {key_names}
    )
    SELECT g.*,
        CASE WHEN totalPackets > 0 THEN droppedPackets::DOUBLE / totalPackets END AS dropRatio,
        greatest(droppedPackets - {Z_95} * sqrt(var), sampled) AS droppedPacketsLow,
        droppedPackets + {Z_95} * sqrt(var) AS droppedPacketsHigh
        {"" if reason_is_key else ", top.topReason"}
    FROM g {"" if reason_is_key else f"LEFT JOIN top ON {join_on}"}
    """
    if reason_is_key:
        sql = sql.replace(", reason ASC NULLS LAST", "")
    rel = con.execute(sql)
    names = [d[0] for d in rel.description]
    out = {}
    for values in rel.fetchall():
        row = dict(zip(names, values))
        key = tuple(freeze(row[k]) for k in keys)
        out[key] = row
    return out


def freeze(value):
    if isinstance(value, list):
        return tuple(value)
    return value


def flowsift_groups(rows, keys):
    out = {}
    for row in rows:
        key = []
        for k in keys:
            value = row[k]
            if k == "bucketStart":
                value = int(datetime.fromisoformat(value.replace("Z", "+00:00")).timestamp())
            key.append(freeze(value))
        out[tuple(key)] = row
    return out


def assert_same(ours, theirs, extra=()):
    assert set(ours) == set(theirs), (
        f"groups differ: only flowsift {set(ours) - set(theirs)}, only DuckDB {set(theirs) - set(ours)}"
    )
    for key, mine in ours.items():
        ref = theirs[key]
        for col in MEASURES:
            a, b = mine[col], ref[col]
            if a is None or b is None:
                assert a is None and b is None, (key, col, a, b)
            elif isinstance(b, float) or isinstance(a, float):
                assert math.isclose(a, b, rel_tol=1e-9, abs_tol=1e-6), (key, col, a, b)
            else:
                assert a == b, (key, col, a, b)
        for col in extra:
            assert mine[col] == ref[col], (key, col, mine[col], ref[col])


def query(files, by, *extra, dims, names=(), every_s=None, where=None, time_from=None, time_to=None, hive=False):
    args = [*files, "--by", by, "--top", "0", *extra]
    if every_s:
        args += ["--every", f"{every_s}s"]
    if where:
        args += ["--where", where]
    if time_from:
        args += ["--from", time_from]
    if time_to:
        args += ["--to", time_to]
    rows = json.loads(run_flowsift(*args))
    keys = (["bucketStart"] if every_s else []) + list(dims)
    ours = flowsift_groups(rows, keys)
    theirs = duck_groups(files, dims, where, every_s, time_from, time_to, hive)
    extra_cols = list(names) + ([] if "forwardingReason" in dims else ["topReason"])
    assert_same(ours, theirs, extra_cols)
    return rows


def all_files(fixtures):
    return [fixtures[x] for x in ("a", "b", "c")]


def test_by_reason_mixed_sampling(fixtures):
    rows = query(all_files(fixtures), "reason", dims={"forwardingReason": "forwardingReason"})
    dropped = [r["droppedPackets"] for r in rows]
    assert dropped == sorted(dropped, reverse=True)


def test_by_next_hop(fixtures):
    query(
        all_files(fixtures),
        "next-hop",
        dims={"nextHop": "coalesce(ipNextHopIPv4Address, ipNextHopIPv6Address)"},
    )


def test_by_interface_and_reason_with_names(fixtures):
    query(
        all_files(fixtures),
        "in-if,reason",
        dims={"ingressInterface": "ingressInterface", "forwardingReason": "forwardingReason"},
        names=["ingressInterfaceName"],
    )


def test_by_peer_as_and_vrf(fixtures):
    query(
        all_files(fixtures),
        "peer-as,in-vrf",
        dims={"bgpNextAdjacentAsNumber": "bgpNextAdjacentAsNumber", "ingressVRFID": "ingressVRFID"},
        names=["ingressVRFname"],
    )


def test_by_label_stack_and_segments(fixtures):
    query(
        all_files(fixtures),
        "labels,segments",
        dims={"mplsLabelStack": "mplsLabelStack", "srhSegmentIPv6BasicList": "srhSegmentIPv6BasicList"},
    )


def test_top_label_with_type(fixtures):
    query(
        all_files(fixtures),
        "top-label",
        dims={"topLabel": "mplsLabelStack[1]", "mplsTopLabelType": "mplsTopLabelType"},
    )


def test_unsampled_exact_counts(fixtures):
    rows = query(
        [fixtures["d"]],
        "exporter",
        dims={"exporter": "exporter"},
    )
    # No sampling: the interval collapses onto the count.
    for row in rows:
        assert row["droppedPacketsLow"] == row["droppedPacketsHigh"] == row["droppedPackets"]


def test_every_five_minutes(fixtures):
    query(
        all_files(fixtures),
        "reason",
        dims={"forwardingReason": "forwardingReason"},
        every_s=300,
    )


def test_every_with_sampled_only(fixtures):
    query([fixtures["a"]], "next-hop", dims={"nextHop": "coalesce(ipNextHopIPv4Address, ipNextHopIPv6Address)"}, every_s=600)


def test_where(fixtures):
    query(
        all_files(fixtures),
        "peer-as",
        dims={"bgpNextAdjacentAsNumber": "bgpNextAdjacentAsNumber"},
        where="protocolIdentifier = 6 AND exporter <> '192.0.2.2'",
    )


def test_where_every_and_time_bounds(fixtures):
    query(
        all_files(fixtures),
        "outcome",
        dims={"forwardingOutcome": "forwardingOutcome"},
        every_s=900,
        where="ingressInterface IN (1, 3)",
        time_from="2026-11-30T01:10:00Z",
        time_to="2026-11-30T01:50:00Z",
    )


def test_hive_partitions(tmp_path):
    rng = random.Random(7)
    files = []
    for day in ("2026-11-30", "2026-12-01"):
        for exporter in ("192.0.2.1", "192.0.2.2"):
            rows = make_rows(rng, 50, lambda r: r.choice([100, None]))
            cols = [c for c in CONTRACT if c not in ("exporter", "packetTotalCount", "octetTotalCount")]
            files.append(write_table(tmp_path / f"date={day}" / f"exporter={exporter}" / "part-0.parquet", rows, cols))
    rows = json.loads(run_flowsift(tmp_path, "--by", "exporter,date", "--top", "0"))
    ours = flowsift_groups(rows, ["exporter", "date"])
    theirs = duck_groups(files, {"exporter": "exporter", "date": "date"}, hive=True)
    assert_same(ours, theirs, ["topReason"])


def test_top_and_csv(fixtures):
    files = all_files(fixtures)
    dims = {"nextHop": "coalesce(ipNextHopIPv4Address, ipNextHopIPv6Address)"}
    theirs = duck_groups(files, dims)
    expected = sorted(theirs.values(), key=lambda r: r["droppedPackets"], reverse=True)[:2]
    rows = json.loads(run_flowsift(*files, "--by", "next-hop", "--top", "2"))
    assert [r["nextHop"] for r in rows] == [r["nextHop"] for r in expected]

    text = run_flowsift(*files, "--by", "next-hop", "--top", "0", fmt="csv")
    parsed = list(csv.DictReader(io.StringIO(text)))
    assert len(parsed) == len(theirs)
    for row in parsed:
        ref = theirs[(row["nextHop"],)]
        assert int(row["droppedPackets"]) == ref["droppedPackets"]
        assert int(row["totalOctets"]) == ref["totalOctets"]
        assert math.isclose(float(row["dropRatio"]), ref["dropRatio"], rel_tol=1e-9)


def test_damaged_capture_input_is_named(tmp_path):
    # A pcap cut inside its 24-octet global header: decoded on the fly, the
    # error names the file and nothing reaches standard output.
    capture = tmp_path / "export.pcap"
    capture.write_bytes(bytes([0xD4, 0xC3, 0xB2, 0xA1, 2, 0, 4, 0]))
    proc = subprocess.run(
        [flowsift_bin(), "drops", str(capture)], capture_output=True, text=True, check=False
    )
    assert proc.returncode != 0
    assert "export.pcap" in proc.stderr
    assert proc.stdout == ""
