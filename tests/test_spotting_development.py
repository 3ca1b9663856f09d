"""Development sessions of the spotting protocol: a session of each wearer that the protocol
never fits, tunes or scores, counted with the one matcher."""

import json
from dataclasses import asdict

import pytest

from bridge.evaluation.matching import format_by_name
from bridge.evaluation.spotting import DEV_SESSION, ROLES, Protocol, protocol_takes, run_development
from bridge.garment import FULL_GESTURES

TINY = Protocol(wearers=2, fit_reps=2, fit_null_s=20.0, tune_reps=1, tune_null_s=10.0, score_reps=1,
                score_null_s=10.0, dev_reps=1, dev_null_s=30.0)


def test_development_sessions_are_apart_from_every_protocol_session(tmp_path):
    takes = protocol_takes(TINY, tmp_path, roles=("fit0", "fit1", "dev"))
    assert DEV_SESSION not in ROLES.values()
    for w in range(TINY.wearers):
        dev = takes[(w, "dev")]
        assert dev.session == f"session{DEV_SESSION}"
        assert {takes[(w, r)].session for r in ("fit0", "fit1")} == {"session0", "session1"}
        assert sorted(iv.label for iv in dev.intervals) == sorted(FULL_GESTURES)   # one of each
        # only what was asked for is rendered; the dev take is named by its settings
    names = sorted(p.name for p in tmp_path.glob("*.take"))
    assert names == sorted(f"wearer{w}-{r}.take" for w in range(2) for r in ("fit0", "fit1", "dev1x30s"))


def test_a_cache_of_the_protocol_takes_development_sessions_of_any_length(tmp_path):
    stamp = {k: v for k, v in asdict(TINY).items() if not k.startswith("dev_")}   # written before they existed
    (tmp_path / "protocol.json").write_text(json.dumps(stamp))
    protocol_takes(Protocol(**{**asdict(TINY), "dev_null_s": 20.0}), tmp_path, roles=("dev",))
    with pytest.raises(ValueError, match="another protocol"):
        protocol_takes(Protocol(**{**asdict(TINY), "fit_reps": 3}), tmp_path, roles=("dev",))


def test_development_counts_every_cue_of_each_wearer(tmp_path):
    result = run_development(TINY, "linear", tmp_path, progress=None)
    assert len(result["per_wearer"]) == TINY.wearers
    for c in result["per_wearer"]:
        assert c["performed"] == len(FULL_GESTURES) * TINY.dev_reps
        assert c["hit"] + c["missed"] == c["performed"]
        assert c["false"] == c["double"] + c["wrong_name"] + c["ordinary"]
    pooled = result["pooled"]
    assert pooled["performed"] == TINY.wearers * len(FULL_GESTURES)
    assert pooled["hit"] == sum(c["hit"] for c in result["per_wearer"])
    # by name: every gesture performed once by each wearer; the table names each one
    assert {n: c["performed"] for n, c in pooled["by_name"].items() if c["performed"]} == \
        dict.fromkeys(FULL_GESTURES, TINY.wearers)
    assert sum(c["missed"] for c in pooled["by_name"].values()) == pooled["missed"]
    table = format_by_name(pooled)
    assert len(table) == 2 + len(pooled["by_name"]) and all(f"| {n} |" in "\n".join(table) for n in FULL_GESTURES)


def test_the_prior_people_are_as_many_as_asked_and_named_by_their_length(tmp_path):
    """Ordinary movement of some simulated people, cues of others (as many as asked); a
    cached prior take is reused only at the same length."""
    from bridge.evaluation.spotting import prior_options
    p = Protocol(**{**asdict(TINY), "prior_wearers": 2, "prior_s": 12.0, "prior_cue_people": 3})
    takes = protocol_takes(p, tmp_path, roles=())
    opts = prior_options(p, takes)
    assert len(opts["ordinary"]) == 2 and len(opts["others"]) == 3
    assert all(r.freq_hz.shape[0] == round(12.0 * r.rate_hz) and not r.intervals for r in opts["ordinary"])
    assert all(sorted(iv.label for iv in r.intervals) == sorted(FULL_GESTURES) for r in opts["others"])
    longer = protocol_takes(Protocol(**{**asdict(p), "prior_s": 15.0}), tmp_path, roles=())
    assert longer[(0, "prior")].freq_hz.shape[0] == round(15.0 * longer[(0, "prior")].rate_hz)
    assert prior_options(Protocol(**{**asdict(p), "prior_cue_people": 0}), takes).keys() == {"ordinary"}
    assert prior_options(Protocol(**{**asdict(p), "prior_reps": 0, "prior_wearers": 0}), takes) == {}
