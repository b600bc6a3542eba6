"""Run pseudonyms: keyed (HMAC-SHA-256), stable for a key, one per source id, and not linkable without the key.

Sources: RFC 2104 (HMAC), RFC 4231 section 4 (HMAC-SHA-256 test vectors, cases 1-4, 6 and 7).
"""

from __future__ import annotations

import hashlib
import json
import os
import re
import stat
from pathlib import Path
from types import SimpleNamespace

import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st

from riskbench.errors import RiskbenchError
from riskbench.workflow.pseudonyms import (
    PseudonymKeyError,
    hmac_sha256,
    key_file_of,
    load_or_create_key,
    pseudonym_map,
    replace_ids,
)

KEY = bytes(range(32))

# RFC 4231, section 4.2-4.8 (test case 5 is truncated output and is left out): key, data, HMAC-SHA-256.
RFC_4231 = [
    (b"\x0b" * 20, b"Hi There", "b0344c61d8db38535ca8afceaf0bf12b881dc200c9833da726e9376c2e32cff7"),
    (b"Jefe", b"what do ya want for nothing?", "5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843"),
    (b"\xaa" * 20, b"\xdd" * 50, "773ea91e36800e46854db8ebd09181a72959098b3ef8c122d9635514ced565fe"),
    (bytes(range(1, 26)), b"\xcd" * 50, "82558a389a443c0ea4cc819899f2083a85f0faa3e578f8077a2e3ff46729665b"),
    (
        b"\xaa" * 131,
        b"Test Using Larger Than Block-Size Key - Hash Key First",
        "60e431591ee0b67f0d8a26aacbf5b77f8e0bc6213728c5140546040f0ee37f54",
    ),
    (
        b"\xaa" * 131,
        b"This is a test using a larger than block-size key and a larger than block-size data. The key "
        b"needs to be hashed before being used by the HMAC algorithm.",
        "9b09ffa71b942fcb27635fbcd5b0e944bfdc63644f0713938a7f51535c3a35e2",
    ),
]


@pytest.mark.parametrize(("key", "data", "expected"), RFC_4231)
def test_hmac_sha256_matches_rfc_4231(key, data, expected):
    assert hmac_sha256(key, data).hex() == expected


@given(st.sets(st.from_regex(r"P\d{6}", fullmatch=True), min_size=1, max_size=40), st.binary(min_size=16, max_size=64))
def test_pseudonyms_are_one_to_one_stable_and_reveal_no_id(ids, key):
    mapping = pseudonym_map(ids, key)
    assert set(mapping) == ids and len(set(mapping.values())) == len(ids)
    assert mapping == pseudonym_map(sorted(ids, reverse=True), key)  # order of input does not matter
    assert not set(mapping.values()) & ids
    assert all(v.startswith("R") for v in mapping.values())


def test_the_order_follows_the_keyed_hash():
    ids = [f"P{i:06d}" for i in range(50)]
    mapping = pseudonym_map(ids, KEY)
    by_hash = sorted(ids, key=lambda s: hmac_sha256(KEY, s.encode()))
    assert [mapping[i] for i in by_hash] == [f"R{n:05d}" for n in range(1, 51)]
    other = pseudonym_map(ids, bytes(32))
    assert other != mapping  # another key, another assignment


def test_a_short_or_missing_key_is_refused():
    with pytest.raises(PseudonymKeyError):
        pseudonym_map(["a"], b"short")
    with pytest.raises(PseudonymKeyError):
        pseudonym_map(["a"], 20240611)  # a seed is not a key


def test_replace_ids_keeps_missing_ids_missing():
    table = pd.DataFrame({"patient_id": ["P1", None, "P2", "P1"], "x": [1, 2, 3, 4]})
    out = replace_ids(table, pseudonym_map(["P1", "P2"], KEY))
    assert out["patient_id"].isna().tolist() == [False, True, False, False]
    assert out["patient_id"].iloc[0] == out["patient_id"].iloc[3] != out["patient_id"].iloc[2]
    assert table["patient_id"].iloc[0] == "P1"  # the input is not changed


# ---------------------------------------------------------------------------------------------------------
# The key file


def test_a_new_key_file_is_owner_only_and_gives_the_same_key_again(tmp_path):
    path = tmp_path / "study.key"
    key = load_or_create_key(path)
    assert len(key) == 32
    assert stat.S_IMODE(path.stat().st_mode) == 0o600
    assert re.fullmatch(r"[0-9a-f]{64}\n", path.read_text())
    assert load_or_create_key(path) == key
    assert load_or_create_key(tmp_path / "other.key") != key


@pytest.mark.parametrize("mode", [0o640, 0o604, 0o660, 0o644])
def test_a_key_file_readable_by_others_is_refused(tmp_path, mode):
    path = tmp_path / "study.key"
    load_or_create_key(path)
    os.chmod(path, mode)
    with pytest.raises(RiskbenchError, match="chmod 600") as err:
        load_or_create_key(path)
    assert "\n" not in str(err.value) and path.read_text().strip() not in str(err.value)


def test_a_key_file_inside_the_run_folder_is_refused(tmp_path):
    run = tmp_path / "results" / "demo"
    with pytest.raises(PseudonymKeyError, match="inside the run folder"):
        load_or_create_key(run / "data" / "k.key", run_dir=run)
    # the runner's staging folder becomes results/demo (or results/demo.failed)
    staging = tmp_path / "results" / ".demo.partial"
    for place in (tmp_path / "results" / "demo" / "k.key", tmp_path / "results" / "demo.failed" / "k.key"):
        with pytest.raises(PseudonymKeyError, match="inside the run folder"):
            load_or_create_key(place, run_dir=staging)
    assert not (tmp_path / "results").exists()  # nothing was created
    assert len(load_or_create_key(tmp_path / "outside.key", run_dir=staging)) == 32


def test_a_user_named_key_file_is_read_and_bad_content_refused(tmp_path):
    path = tmp_path / "mine.key"
    fd = os.open(path, os.O_WRONLY | os.O_CREAT, 0o600)
    os.write(fd, ("ab" * 20 + "\n").encode())
    os.close(fd)
    assert load_or_create_key(path) == bytes.fromhex("ab" * 20)
    path.write_text("not a key at all\n")
    with pytest.raises(PseudonymKeyError, match="not a pseudonym key"):
        load_or_create_key(path)
    path.write_text("abcd\n")  # too short
    with pytest.raises(PseudonymKeyError, match="at least 32 hexadecimal"):
        load_or_create_key(path)


def test_the_key_file_defaults_beside_the_configuration(tmp_path):
    assert key_file_of(SimpleNamespace(path=tmp_path / "study.toml")) == tmp_path / "study.key"
    named = SimpleNamespace(path=tmp_path / "study.toml", privacy=SimpleNamespace(key_file=tmp_path / "k" / "x.key"))
    assert key_file_of(named) == tmp_path / "k" / "x.key"
    with pytest.raises(PseudonymKeyError, match="key_file"):
        key_file_of(SimpleNamespace(path=None))


# ---------------------------------------------------------------------------------------------------------
# The linkage attack of the issue: everything in the run folder plus the true id list


ROOT = Path(__file__).resolve().parents[2]
DEMO_DATA = ROOT / "demo_data" / "clean"


@pytest.fixture(scope="module")
def cohort_run(tmp_path_factory):
    if not (DEMO_DATA / "patients.csv").is_file():
        pytest.skip("the committed demo cohort (demo_data/clean) is not in this checkout")
    from riskbench.workflow.config import load_config
    from riskbench.workflow.manifest import build_manifest, write_manifest
    from riskbench.workflow.stage_cohort import run_cohort_stage

    base = tmp_path_factory.mktemp("linkage")
    patients = pd.read_csv(DEMO_DATA / "patients.csv", dtype=str)
    keep = set(sorted(patients["patient_id"])[:300])
    for name in ("patients", "measurements", "outcomes"):
        table = patients if name == "patients" else pd.read_csv(DEMO_DATA / f"{name}.csv", dtype=str)
        table[table["patient_id"].isin(keep)].to_csv(base / f"{name}.csv", index=False)
    text = (ROOT / "configs" / "demo.toml").read_text().replace("../demo_data/clean/", f"{base}/")
    (base / "analysis.toml").write_text(text)
    config = load_config(base / "analysis.toml")
    run = base / "results" / "run"
    run_cohort_stage(config, run)
    write_manifest(build_manifest(config, run, started="start", finished="end", stage_seconds={}), run)
    key = load_or_create_key(key_file_of(config))
    return {"run": run, "ids": sorted(keep), "key": key, "key_file": key_file_of(config), "config": config}


def _linked(ids: list[str], order_key) -> dict:
    """The pseudonyms an attacker assigns to the true ids when guessing the hash order."""
    width = max(5, len(str(len(ids))))
    return {s: f"R{n:0{width}d}" for n, s in enumerate(sorted(ids, key=order_key), start=1)}


def _material(run: Path) -> set:
    """Every candidate secret an attacker finds in the run folder: tokens of text files, JSON values, file bytes."""
    found: set = set()
    for path in run.rglob("*"):
        if not path.is_file():
            continue
        data = path.read_bytes()
        found.add(data)
        if path.suffix in (".csv", ".json", ".html", ".svg", ".ipynb", ".txt"):
            text = data.decode("utf-8", "replace")
            found.update(re.findall(r"[A-Za-z0-9_.+\-]{1,80}", text))
            if path.suffix == ".json":

                def walk(v):
                    if isinstance(v, dict):
                        for x in v.values():
                            walk(x)
                    elif isinstance(v, list):
                        for x in v:
                            walk(x)
                    elif v is not None:
                        found.add(str(v))

                walk(json.loads(text))
    return found


def test_the_run_folder_does_not_link_pseudonyms_back_to_ids(cohort_run):
    run, ids, key = cohort_run["run"], cohort_run["ids"], cohort_run["key"]
    truth = pseudonym_map(ids, key)
    written = set(pd.read_parquet(run / "data" / "patients.parquet")["patient_id"])
    assert written <= set(truth.values()) and len(written) > 250

    def matches(guess: dict) -> int:
        return sum(guess[i] == truth[i] for i in ids)

    # the attack works with the key (so the test can fail) ...
    assert matches(_linked(ids, lambda s: hmac_sha256(key, s.encode()))) == len(ids)
    material = _material(run)
    assert str(cohort_run["config"].seed) in material  # the seed is in the manifest, as before: it is tried
    assert key.hex() not in material and not any(key.hex().encode() in m for m in material if isinstance(m, bytes))
    best = 0
    for m in material:
        raw = m if isinstance(m, bytes) else m.encode()
        text = m.decode("utf-8", "replace") if isinstance(m, bytes) else m
        guesses = (
            lambda s, t=text: hashlib.sha256(f"{t}\x00{s}".encode()).hexdigest(),  # the old unkeyed order
            lambda s, r=raw: hmac_sha256(r, s.encode()),
        )
        best = max(best, *(matches(_linked(ids, g)) for g in guesses))
    # a random assignment matches about one id; anything found in the folder does no better than chance
    assert best <= 8, f"{best} of {len(ids)} pseudonyms linked back with material from the run folder"


def test_the_key_file_stays_outside_the_run_and_reruns_give_the_same_pseudonyms(cohort_run, tmp_path):
    from riskbench.workflow.stage_cohort import run_cohort_stage

    key_file = cohort_run["key_file"]
    assert stat.S_IMODE(key_file.stat().st_mode) == 0o600
    assert cohort_run["run"] not in key_file.parents
    again = tmp_path / "again"
    run_cohort_stage(cohort_run["config"], again)
    first = pd.read_parquet(cohort_run["run"] / "data" / "counting_process.parquet")
    second = pd.read_parquet(again / "data" / "counting_process.parquet")
    pd.testing.assert_frame_equal(first, second)
