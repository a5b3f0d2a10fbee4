"""Reading records: foreign and broken files are skipped with a reason; bad folders are errors."""

import json

import pytest

from loopzoo.report.loading import ReportInputError, load_runs


def test_demo_directory_loads_and_skips_foreign_files(demo_dir, demo):
    runs, skipped = load_runs(demo_dir)
    assert len(runs) == len(demo.demo_records())
    reasons = {s.source: s.reason for s in skipped}
    assert set(reasons) == {"records/notes.json", "records/torn.json"}
    assert "schema" in reasons["records/notes.json"]
    assert "not valid JSON" in reasons["records/torn.json"]


@pytest.mark.parametrize(
    ("change", "field"),
    [
        ({"status": "exploded"}, "status"),
        ({"kind": "sweep"}, "kind"),
        ({"seed": "zero"}, "seed"),
        ({"seed": True}, "seed"),
        ({"model": ""}, "model"),
        ({"params": 1.5}, "params"),
        ({"metrics": [1, 2]}, "metrics"),
        ({"primary": {"name": "mse", "goal": "lowest"}}, "primary"),
        ({"schema": "other/2"}, "schema"),
    ],
)
def test_bad_fields_are_skipped_naming_the_field(tmp_path, demo, change, field):
    demo.write_records(tmp_path, [demo.record(), demo.record(run_id="bad", **change)])
    runs, skipped = load_runs(tmp_path)
    assert [r.run_id for r in runs] == [demo.record()["run_id"]]
    assert len(skipped) == 1 and repr(field) in skipped[0].reason


def test_non_object_json_is_skipped(tmp_path, demo):
    demo.write_records(tmp_path, [demo.record()])
    (tmp_path / "records" / "list.json").write_text(json.dumps([1, 2]))
    runs, skipped = load_runs(tmp_path)
    assert len(runs) == 1 and "JSON object" in skipped[0].reason


def test_missing_directory_and_records_folder_are_errors(tmp_path):
    with pytest.raises(ReportInputError, match="does not exist"):
        load_runs(tmp_path / "nowhere")
    with pytest.raises(ReportInputError, match="no 'records' folder"):
        load_runs(tmp_path)


def test_variants_separate_task_options_and_model_options(tmp_path, demo):
    short = demo.record(run_id="a")
    long = demo.record(run_id="b", config={"task": {"options": {"length": 200}},
                                           "model": {"options": {"num_layers": 3}}})
    demo.write_records(tmp_path, [short, long])
    runs, _ = load_runs(tmp_path)
    assert {r.task_variant for r in runs} == {(("length", "50"),), (("length", "200"),)}
    assert len({r.row_variant for r in runs}) == 2
