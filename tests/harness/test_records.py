"""Run ids, records and the output-directory manifest."""

import hashlib
import json
from importlib import resources

import pytest

from loopzoo.harness import records, runids
from loopzoo.harness.config import compose_job, composer
from loopzoo.harness.errors import OutDirError


def job(*overrides):
    with composer():
        return compose_job(list(overrides))


def body(status="ok", **extra):
    return {"status": status, "reason": None, "model": "gru", "task": "adding", "seed": 0,
            "metrics": {"test": {"mse": 0.1}}, **extra}


def test_run_id_depends_on_content_not_on_where_or_how_visibly_it_runs():
    base = runids.run_id(job("model=gru", "seed=1"))
    assert base.startswith("adding-gru-s1-")
    assert runids.run_id(job("model=gru", "seed=1", "out=/elsewhere")) == base
    assert runids.run_id(job("model=gru", "seed=1", "trainer.enable_progress_bar=false")) == base
    for change in ("seed=2", "optim.lr=0.01", "task.budget=4000", "model=lstm",
                   "task.options.length=20", "trainer.max_steps=10"):
        assert runids.run_id(job("model=gru", "seed=1", change)) != base, change
    # Stable across processes and sessions: a hash of canonical JSON, not Python's hash().
    assert runids.run_id(job("model=gru", "seed=1")) == base


def test_run_id_is_the_hash_of_the_identity_and_the_identity_omits_out():
    cfg = job("model=stacked", "out=/x")
    content = runids.identity(cfg)
    assert "out" not in content and "per_task" not in content
    assert "enable_progress_bar" not in content["trainer"]
    assert content["model"]["name"] == "stacked" and content["trainer"]["max_steps"] > 0


def test_baseline_ids_are_shared_by_models_of_one_task_and_seed():
    a, b = job("model=gru", "seed=3"), job("model=lstm", "seed=3")
    assert runids.baseline_run_id(a, "memoryless") == runids.baseline_run_id(b, "memoryless")
    assert runids.baseline_run_id(a, "memoryless") != runids.baseline_run_id(
        job("model=gru", "seed=4"), "memoryless")
    assert runids.baseline_run_id(a, "memoryless").startswith("adding-memoryless-s3-")


def test_make_record_adds_the_envelope_and_every_field():
    record = records.make_record(body(), run_id="r1", kind="model", config={"seed": 0})
    assert record["schema"] == records.SCHEMA == "loopzoo.run/1"
    assert (record["run_id"], record["kind"], record["config"]) == ("r1", "model", {"seed": 0})
    assert set(records.BODY_FIELDS) <= set(record)
    assert record["cost"] is None  # absent fields are present as null


@pytest.mark.parametrize("status", [None, "done", "OK"])
def test_make_record_refuses_unknown_status(status):
    with pytest.raises(ValueError, match="status"):
        records.make_record(body(status), run_id="r1", kind="model", config={})


def test_make_record_refuses_unknown_kind():
    with pytest.raises(ValueError, match="kind 'trial'"):
        records.make_record(body(), run_id="r1", kind="trial", config={})


def test_records_round_trip_atomically(tmp_path):
    record = records.make_record(body(), run_id="r1", kind="model", config={})
    path = records.write_record(tmp_path, record)
    assert path == tmp_path / "records" / "r1.json"
    assert records.read_record(path) == json.loads(path.read_text())
    assert [p.name for p in (tmp_path / "records").iterdir()] == ["r1.json"]  # no temp left
    assert records.load_records(tmp_path) == [record]


def test_read_record_refuses_other_schemas_and_broken_files(tmp_path):
    other = tmp_path / "other.json"
    other.write_text(json.dumps({"schema": "loopzoo.run/0", "run_id": "x"}))
    with pytest.raises(OutDirError, match=r"schema 'loopzoo.run/0', expected 'loopzoo.run/1'"):
        records.read_record(other)
    broken = tmp_path / "broken.json"
    broken.write_text('{"schema": "loopzoo.run/1", ')
    with pytest.raises(OutDirError, match="not a readable run record"):
        records.read_record(broken)


@pytest.mark.parametrize(("status", "kept"), [("ok", True), ("diverged", True), ("failed", False)])
def test_rerun_keeps_ok_and_diverged_and_redoes_failed(tmp_path, status, kept):
    records.write_record(tmp_path, records.make_record(body(status), run_id="r1", kind="model",
                                                       config={}))
    assert (records.is_done(tmp_path, "r1") is not None) is kept
    assert records.is_done(tmp_path, "missing") is None


def test_manifest_is_written_once_and_refuses_another_suite_or_schema(tmp_path):
    manifest = records.claim_out_dir(tmp_path, "quick")
    assert manifest["schema"] == records.SCHEMA and manifest["suite"] == "quick"
    assert records.claim_out_dir(tmp_path, "quick")["created"] == manifest["created"]
    with pytest.raises(OutDirError, match="suite 'quick', this run has suite 'long-lag'"):
        records.claim_out_dir(tmp_path, "long-lag")
    with pytest.raises(OutDirError, match="suite 'quick', this run has suite None"):
        records.claim_out_dir(tmp_path, None)
    old = json.loads((tmp_path / records.MANIFEST).read_text())
    old["schema"] = "loopzoo.run/0"
    (tmp_path / records.MANIFEST).write_text(json.dumps(old))
    with pytest.raises(OutDirError, match="schema 'loopzoo.run/0'"):
        records.claim_out_dir(tmp_path, "quick")
    old.update(schema=records.SCHEMA, config_version=records.CONFIG_VERSION + 1)
    (tmp_path / records.MANIFEST).write_text(json.dumps(old))
    with pytest.raises(OutDirError, match="config_version"):
        records.claim_out_dir(tmp_path, "quick")
    old.update(config_version=records.CONFIG_VERSION, suite_digest="0123456789ab")
    (tmp_path / records.MANIFEST).write_text(json.dumps(old))
    with pytest.raises(OutDirError, match="an earlier definition of suite 'quick'"):
        records.claim_out_dir(tmp_path, "quick")


def test_the_suite_digest_is_the_shipped_file_s_hash():
    text = resources.files("loopzoo.conf").joinpath("suite", "quick.yaml").read_bytes()
    assert records.suite_digest("quick") == hashlib.sha256(text).hexdigest()[:12]
    assert records.suite_digest(None) is None


def test_records_without_a_manifest_are_not_adopted(tmp_path):
    (tmp_path / "records").mkdir()
    (tmp_path / "records" / "someone-else.json").write_text("{}")
    with pytest.raises(OutDirError, match="holds records but no loopzoo-out.json"):
        records.claim_out_dir(tmp_path, None)


def test_versions_name_the_stack_and_threads():
    found = records.versions()
    assert {"python", "torch", "lightning", "hydra", "loopzoo", "torch_threads"} <= set(found)
    assert found["torch_threads"] >= 1
