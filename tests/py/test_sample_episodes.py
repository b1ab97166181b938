"""The drops question on every bundled sample capture finds every planted
episode at the right place and reason, with the right size, and background
noise is not mistaken for an episode.

The reference is the ground truth written beside each capture by the
generator (`FILE.truth.json`): it counts exactly what the capture holds.
Sampled counts are scaled 1-in-N (RFC 5474 §5.4: divide by the selection
fraction), so the estimates must match the truth's `*Estimated` figures to
the packet.
"""

import json
import pathlib
import subprocess

import pytest
from flowsift_cli import flowsift_bin

ROOT = pathlib.Path(__file__).resolve().parents[2]
SAMPLES = sorted((ROOT / "sample-captures").glob("*.truth.json"))

# Where-keys of the truth JSON → (--by short name, JSON key(s) of the answer).
WHERE_KEYS = {
    "out-if": ("out-if", "egressInterface", "egressInterfaceName"),
    "in-vrf": ("in-vrf", "ingressVRFID", "ingressVRFname"),
    "next-hop": ("next-hop", "nextHop", None),
    "bgp-next-hop": ("bgp-next-hop", "bgpNextHop", None),
    "peer-as": ("peer-as", "bgpNextAdjacentAsNumber", None),
    "segment": ("segment", "srhActiveSegmentIPv6", None),
    "segments": ("segments", "srhSegmentIPv6BasicList", None),
    "behavior": ("behavior", "srhEndpointBehaviorName", None),
}
BACKGROUND_RATIO = 0.01  # a domain without an episode drops under 1%



def run(*args):
    proc = subprocess.run([flowsift_bin(), *args], capture_output=True, text=True, check=False)
    assert proc.returncode == 0, proc.stderr
    return proc


_converted = {}


def converted(truth_path, tmp_path_factory):
    """Converts the capture once per test session; returns (parquet, stats)."""
    if truth_path not in _converted:
        capture = truth_path.with_name(truth_path.name[: -len(".truth.json")])
        out = tmp_path_factory.mktemp("samples") / (capture.name + ".parquet")
        stats = out.with_suffix(".stats.json")
        run("convert", str(capture), "-o", str(out), "--stats-json", str(stats), "--quiet")
        _converted[truth_path] = (out, json.loads(stats.read_text()))
    return _converted[truth_path]


def drops(parquet, *args):
    return json.loads(run("drops", str(parquet), "--format", "json", "--top", "0", *args).stdout)


@pytest.fixture(params=SAMPLES, ids=[p.name for p in SAMPLES])
def sample(request, tmp_path_factory):
    truth = json.loads(request.param.read_text())
    parquet, stats = converted(request.param, tmp_path_factory)
    return truth, parquet, stats


def test_every_record_decoded_and_export_loss_found(sample):
    truth, _, stats = sample
    acc = stats.get("accounting", stats)
    assert acc["recordsDecoded"] == truth["records"]["flow"] + truth["records"]["options"]
    assert acc["messagesMalformed"] == 0
    # RFC 7011 §3.1 (Errata EID 4396): the lost message shows as a gap of exactly its records.
    assert acc["sequenceGapRecords"] == sum(loss["lostRecords"] for loss in truth.get("exportLoss", []))


def test_each_episode_found_with_its_size(sample):
    truth, parquet, _ = sample
    rows = drops(parquet, "--by", "domain,reason")
    by_key = {(r["observationDomainId"], r["forwardingReason"]): r for r in rows}
    for ep in truth["episodes"]:
        row = by_key.get((ep["observationDomainId"], ep["why"]))
        assert row is not None, f"{ep['name']}: no drops for domain {ep['observationDomainId']} reason {ep['why']}"
        assert int(row["droppedPackets"]) == ep["droppedPacketsEstimated"], ep["name"]
        assert int(row["droppedOctets"]) == ep["droppedOctetsEstimated"], ep["name"]
        # The 95% interval brackets the estimate.
        assert row["droppedPacketsLow"] <= row["droppedPackets"] <= row["droppedPacketsHigh"]


def expected_value(key, value):
    if isinstance(value, dict):
        return value["id"], value.get("name")
    return value, None


def test_each_episode_found_at_its_place(sample):
    truth, parquet, _ = sample
    for ep in truth["episodes"]:
        where = dict(ep["where"])
        domain = where.pop("domain", ep["observationDomainId"])
        end = truth["timeRange"]["end"] if ep.get("ongoingAtEnd") else ep["end"]
        for key, value in where.items():
            if key not in WHERE_KEYS:
                continue
            dim, id_col, name_col = WHERE_KEYS[key]
            rows = drops(
                parquet, "--by", f"{dim},reason", "--where", f"observationDomainId = {domain}",
                "--from", ep["start"], "--to", end,
            )
            assert rows, f"{ep['name']}: nothing by {dim}"
            top = rows[0]  # sorted by dropped packets, largest first
            want, want_name = expected_value(key, value)
            assert top["forwardingReason"] == ep["why"], f"{ep['name']} by {dim}: {top}"
            got = top[id_col]
            if key == "segments":
                assert list(got) == list(want), f"{ep['name']}: {got}"
            else:
                assert str(got) == str(want), f"{ep['name']} by {dim}: {got} != {want}"
            if name_col and want_name:
                assert top[name_col] == want_name


def test_background_is_not_an_episode(sample):
    truth, parquet, _ = sample
    episode_domains = {ep["observationDomainId"] for ep in truth["episodes"]}
    episode_reasons = {ep["why"] for ep in truth["episodes"]}
    background_reasons = {d["why"] for d in truth["background"]["drops"]}
    # Every reason with drops is an episode's or a background one, and the
    # background figures match the truth.
    by_reason = {r["forwardingReason"]: r for r in drops(parquet, "--by", "reason")}
    dropped = {k for k, r in by_reason.items() if r["droppedPackets"] > 0}
    assert dropped <= episode_reasons | background_reasons
    for bg in truth["background"]["drops"]:
        assert int(by_reason[bg["why"]]["droppedPackets"]) == bg["packetsEstimated"]
    # Domains without an episode drop only a background trickle.
    for row in drops(parquet, "--by", "domain"):
        if row["observationDomainId"] not in episode_domains:
            assert row["dropRatio"] < BACKGROUND_RATIO, row
