"""`flowsift compare` on the bundled demo scenario.

References (outside the project) beside each check:

- classes, onsets and convergence times: the scenario's ground truth
  written by the generator beside each capture (`FILE.truth.json`:
  `expectedClass`, `startMs`, `convergenceSeconds`); background noise
  (`wred`, `bad-ttl`) must stay `unaffected`;
- period counts: DuckDB SQL over the Parquet written by `flowsift convert`
  (PyPI `duckdb`), from the measure definitions (record time = flowEndTime,
  else exportTime; t = coalesce(packetDeltaCount, packetTotalCount));
- Wilson intervals and the one-sided pooled two-proportion z-test:
  statsmodels (PyPI `statsmodels`: `proportion_confint(method="wilson")`,
  `proportions_ztest(alternative="larger")`).

Run: build the binary (`cargo build -p flowsift`), then `pytest tests/py`.
"""

import json
import math
import pathlib
import subprocess
from datetime import datetime

import duckdb
import pytest
from statsmodels.stats.proportion import proportion_confint, proportions_ztest
from flowsift_cli import flowsift_bin

ROOT = pathlib.Path(__file__).resolve().parents[2]
SAMPLES = ROOT / "sample-captures"
WINDOW = "2026-11-30T00:50:00Z..2026-11-30T01:10:00Z"
BUCKET_S = 60
CAPTURES = [
    "regional-carrier.pcapng",
    "regional-carrier.pcap",
    "regional-carrier.ipfix",
    "regional-carrier-quiet.pcapng",
]



def run(*args, check=True):
    proc = subprocess.run([flowsift_bin(), *args], capture_output=True, text=True, timeout=300)
    if check and proc.returncode not in (0, 1):
        raise AssertionError(f"flowsift {' '.join(args)} failed ({proc.returncode}): {proc.stderr}")
    return proc


_cache = {}


def compare_json(capture: str, *extra):
    key = (capture, extra)
    if key not in _cache:
        proc = run("compare", str(SAMPLES / capture), "--window", WINDOW, "--format", "json", *extra)
        _cache[key] = json.loads(proc.stdout)
    return _cache[key]


def truth(capture: str):
    return json.loads((SAMPLES / f"{capture}.truth.json").read_text())


def by_label(result):
    return {tuple(v["key"]): v for v in result["values"]}


def check_against_truth(result, t):
    """Ground truth: each episode's expectedClass; transient episodes converge
    within one bucket of convergenceSeconds; onset within one bucket of the
    episode start; everything else (background wred, bad-ttl) unaffected."""
    values = by_label(result)
    episodes = {(str(e["observationDomainId"]), e["why"]): e for e in t["episodes"]}
    for key, episode in episodes.items():
        assert key in values, f"{episode['name']}: no value {key}"
        value = values[key]
        assert value["class"] == episode["expectedClass"], (episode["name"], value["evidence"])
        assert value["onset"] is not None, episode["name"]
        onset_ms = int(datetime.fromisoformat(value["onset"].replace("Z", "+00:00")).timestamp() * 1000)
        assert abs(onset_ms - episode["startMs"]) <= BUCKET_S * 1000, (episode["name"], value["onset"])
        if episode["expectedClass"] == "transient":
            got = value["convergenceSeconds"]
            assert got is not None, value["evidence"]
            assert abs(got - episode["convergenceSeconds"]) <= BUCKET_S, (got, episode["convergenceSeconds"])
        else:
            assert value["convergenceSeconds"] is None
    for key, value in values.items():
        if key not in episodes:
            assert value["class"] == "unaffected", value["evidence"]
    expected = "still-dropping" if any(e["expectedClass"] == "persistent" for e in t["episodes"]) else (
        "new-drops" if any(e["expectedClass"] == "new" for e in t["episodes"]) else (
            "recovered" if t["episodes"] else "no-change"))
    assert result["verdict"] == expected


@pytest.mark.parametrize("capture", CAPTURES)
def test_episodes_get_their_class_and_convergence(capture):
    check_against_truth(compare_json(capture), truth(capture))


# Fresh captures from the generator (other seeds, the default 120,000
# records), each checked against the ground truth it writes.
FRESH = [
    ("regional-carrier", 11, "16000"),
    ("regional-carrier", 12, "16000"),
    ("regional-carrier", 13, "16000"),
    ("regional-carrier", 21, None),
    ("regional-carrier-quiet", 22, None),
    ("regional-carrier-quiet", 23, "6000"),
]


@pytest.mark.parametrize("scenario,seed,records", FRESH)
def test_fresh_seeds_against_their_truth(tmp_path, scenario, seed, records):
    capture = tmp_path / f"{scenario}-{seed}.pcapng"
    args = ["synth", "--scenario", scenario, "-o", str(capture), "--seed", str(seed)]
    if records:
        args += ["--records", records]
    run(*args)
    result = json.loads(run("compare", str(capture), "--window", WINDOW, "--format", "json").stdout)
    check_against_truth(result, json.loads(pathlib.Path(f"{capture}.truth.json").read_text()))


@pytest.mark.parametrize("capture", CAPTURES)
def test_verdict_and_exit_codes(capture):
    """Ground truth: the regional-carrier captures have persistent and new
    episodes, the quiet one has none."""
    quiet = not truth(capture)["episodes"]
    result = compare_json(capture)
    assert result["verdict"] == ("no-change" if quiet else "still-dropping")
    assert result["headline"].startswith("NO CHANGE" if quiet else "STILL DROPPING")
    for fail_on in ("persistent", "new", "any"):
        proc = run("compare", str(SAMPLES / capture), "--window", WINDOW, "--fail-on", fail_on)
        assert proc.returncode == (0 if quiet else 1), (fail_on, proc.stderr)
    # The verdict comes first in the table, the caution last.
    proc = run("compare", str(SAMPLES / capture), "--window", WINDOW)
    assert proc.stdout.startswith("Verdict: ")
    assert "estimates from sampled flow exports" in proc.stdout
    assert "operator decides" in proc.stdout


def test_json_shape_is_stable():
    """The documented shape (version 1)."""
    result = compare_json("regional-carrier.pcapng")
    assert result["version"] == 1
    for key in ("verdict", "headline", "evidence", "counts", "dimensions", "window", "before", "after",
                "thresholds", "testAlpha", "method", "caution", "buckets", "reasons", "values"):
        assert key in result, key
    assert result["dimensions"] == ["domain", "reason"] or len(result["dimensions"]) == 2
    assert result["thresholds"] == {
        "baselineSeconds": 1200, "afterSeconds": None, "everySeconds": 60,
        "stableBuckets": 3, "alpha": 0.01, "minIncrease": 0.01,
    }
    value = result["values"][0]
    for key in ("key", "label", "class", "topReason", "before", "during", "after", "duringTest", "afterTest",
                "bandHigh", "onset", "convergedAt", "convergenceSeconds", "sinceWindowStartSeconds",
                "evidence", "series"):
        assert key in value, key
    for key in ("droppedPackets", "totalPackets", "sampledDropped", "sampledTotal", "flowRecords",
                "droppedRecords", "variance", "effectiveN", "dropRatio", "ratioLow", "ratioHigh"):
        assert key in value["before"], key
    assert "Wilson" in result["method"] and "7.3.3" in result["method"] and "Cochran" in result["method"]


def test_statistics_match_statsmodels():
    """statsmodels: Wilson interval on (ratio x effectiveN, effectiveN), and the
    one-sided pooled two-proportion z-test on (droppedRecords, flowRecords)."""
    result = compare_json("regional-carrier.pcapng")
    checked = 0
    for value in result["values"]:
        for name in ("before", "during", "after"):
            period = value[name]
            if period["dropRatio"] is None:
                continue
            n = period["effectiveN"]
            x = period["dropRatio"] * n
            low, high = proportion_confint(x, n, alpha=0.05, method="wilson")
            # 1.96 vs the exact quantile 1.959964: differences below 1e-4.
            assert abs(low - period["ratioLow"]) < 1e-4 and abs(high - period["ratioHigh"]) < 1e-4
            checked += 1
        for name, test in (("during", value["duringTest"]), ("after", value["afterTest"])):
            if test["z"] is None:
                continue
            b, later = value["before"], value[name]
            xs = [later["droppedRecords"], b["droppedRecords"]]
            ns = [later["flowRecords"], b["flowRecords"]]
            z, p = proportions_ztest(xs, ns, alternative="larger")
            assert math.isclose(z, test["z"], rel_tol=1e-9, abs_tol=1e-9), (value["label"], z, test["z"])
            # Our normal tail uses Abramowitz & Stegun 7.1.26 (|error| <= 1.5e-7).
            assert abs(p - test["pValue"]) < 1e-6, (value["label"], p, test["pValue"])
            checked += 1
    assert checked > 30


@pytest.fixture(scope="module")
def parquet(tmp_path_factory):
    out = tmp_path_factory.mktemp("cmp") / "regional-carrier.parquet"
    run("convert", str(SAMPLES / "regional-carrier.pcapng"), "-o", str(out))
    return out


def test_period_counts_match_duckdb(parquet):
    """DuckDB over the converted Parquet: sampled packets, dropped packets and
    records of domain 1102 / policer per period."""
    result = compare_json("regional-carrier.pcapng")
    value = by_label(result)[("1102", "policer")]
    con = duckdb.connect()
    spans = {
        "before": ("2026-11-30 00:30:00", "2026-11-30 00:50:00"),
        "during": ("2026-11-30 00:50:00", "2026-11-30 01:10:00"),
        "after": ("2026-11-30 01:10:00", "2026-11-30 01:30:00"),
    }
    for name, (lo, hi) in spans.items():
        row = con.execute(
            f"""
            WITH r AS (
              SELECT coalesce(flowEndTime, exportTime) AS t,
                     coalesce(packetDeltaCount, 0) AS pk,  -- the capture has no packetTotalCount
                     forwardingReason AS why
              FROM read_parquet('{parquet}') WHERE observationDomainId = 1102)
            SELECT sum(pk), sum(CASE WHEN why = 'policer' THEN pk ELSE 0 END), count(*)
            FROM r WHERE t >= TIMESTAMPTZ '{lo}+00' AND t < TIMESTAMPTZ '{hi}+00'
            """
        ).fetchone()
        period = value[name]
        assert (period["sampledTotal"], period["sampledDropped"], period["flowRecords"]) == tuple(
            int(v or 0) for v in row
        ), name
        # Ratio-estimator variance over records, n/(n-1) * sum((k - p t)^2) / (sum t)^2
        # (Cochran 1977, ch. 6), recomputed record by record in DuckDB.
        (var, dropped_records) = con.execute(
            f"""
            WITH r AS (
              SELECT coalesce(packetDeltaCount, 0) AS t,
                     CASE WHEN forwardingReason = 'policer' THEN coalesce(packetDeltaCount, 0) ELSE 0 END AS k
              FROM read_parquet('{parquet}')
              WHERE observationDomainId = 1102
                AND coalesce(flowEndTime, exportTime) >= TIMESTAMPTZ '{lo}+00'
                AND coalesce(flowEndTime, exportTime) < TIMESTAMPTZ '{hi}+00'),
            s AS (SELECT sum(k)::DOUBLE / sum(t) AS p, sum(t)::DOUBLE AS st, count(*)::DOUBLE AS n FROM r)
            SELECT (SELECT n FROM s) / ((SELECT n FROM s) - 1)
                   * sum(power(k - (SELECT p FROM s) * t, 2)) / power((SELECT st FROM s), 2),
                   count(*) FILTER (WHERE k > 0)
            FROM r
            """
        ).fetchone()
        assert period["droppedRecords"] == dropped_records, name
        assert math.isclose(period["variance"], var, rel_tol=1e-9, abs_tol=1e-15), (name, period["variance"], var)
