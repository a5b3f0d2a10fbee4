"""The report files: written atomically, byte-identical on rerun and across folders, readable CSV,
self-contained HTML, and the ``loopzoo report DIR`` entry point's output and exit codes."""

import base64
import csv
import io
import re
import shutil
from html.parser import HTMLParser

import pytest

import loopzoo.report.build as build_module
from loopzoo.report import ReportInputError, build_report, main
from loopzoo.report.csv_table import CSV_COLUMNS

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


class _Images(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.images: list[dict[str, str]] = []

    def handle_starttag(self, tag, attrs):
        if tag == "img":
            self.images.append(dict(attrs))


def test_build_writes_three_files_atomically(demo_dir, monkeypatch):
    written = []
    real = build_module.atomic_write_text
    monkeypatch.setattr(build_module, "atomic_write_text",
                        lambda path, text: (written.append(path.name), real(path, text)))
    paths = build_report(demo_dir)
    assert [p.name for p in paths] == ["report.md", "report.csv", "report.html"]
    assert written == ["report.md", "report.csv", "report.html"]
    assert all(p.parent == demo_dir for p in paths)
    assert not [p for p in demo_dir.iterdir() if p.name.endswith(".tmp")]


def test_rerun_and_other_folder_give_identical_bytes(demo_dir, tmp_path):
    first = [p.read_bytes() for p in build_report(demo_dir)]
    again = [p.read_bytes() for p in build_report(demo_dir)]
    copy = tmp_path / "elsewhere" / "copy"
    shutil.copytree(demo_dir / "records", copy / "records")
    moved = [p.read_bytes() for p in build_report(copy)]
    assert first == again == moved
    assert str(tmp_path).encode() not in first[0] + first[1] + first[2]


def test_csv_has_one_line_per_row(built_demo):
    csv_path = built_demo / "report.csv"
    lines = list(csv.DictReader(io.StringIO(csv_path.read_text())))
    assert tuple(lines[0]) == CSV_COLUMNS
    # Every line has exactly one value per column (DictReader puts extras under None).
    assert all(None not in line and None not in line.values() for line in lines)
    # Demo: 6 pump rows, 5 valve rows, 3 flaky rows.
    assert len(lines) == 14
    best = next(r for r in lines if r["task"] == "pump-vibration" and r["rank"] == "1")
    assert best["row"] == "stacked" and best["vs_best"] == "best" and best["n"] == "4"
    assert float(best["ci95_low"]) < float(best["mean"]) < float(best["ci95_high"])


def test_html_embeds_every_picture_as_png(built_demo):
    html = (built_demo / "report.html").read_text()
    parser = _Images()
    parser.feed(html)
    # Three pictures per task with data (3 tasks) plus the cross-task front.
    assert len(parser.images) == 10
    for image in parser.images:
        assert image["alt"]
        head, data = image["src"].split(",", 1)
        assert head == "data:image/png;base64"
        assert base64.b64decode(data).startswith(PNG_SIGNATURE)
    assert "<script" not in html and "http" not in html.replace("http-equiv", "")
    links = re.findall(r'href="#([^"]+)"', html)
    assert len(links) == 6 and all(f'id="{anchor}"' in html for anchor in links)


def test_markdown_names_statistics_alpha_and_skips(built_demo):
    markdown = (built_demo / "report.md").read_text()
    assert "Welch's two-sided t-test" in markdown and "alpha = 0.05" in markdown
    assert "Student-t" in markdown
    assert "records/torn.json: not valid JSON" in markdown
    assert "## Verdicts" in markdown and "Ship stacked" in markdown
    # No demo task has a baseline on top, so the extra comparison column stays out.
    assert "vs best topology" not in markdown


def test_main_prints_tables_and_html_path(demo_dir, capsys):
    assert main([str(demo_dir), "--alpha", "0.6"]) == 0
    out = capsys.readouterr().out
    assert "| row | kind | params |" in out and "alpha = 0.6" in out
    html_line = f"\nHTML report: {demo_dir / 'report.html'}\n"
    assert out == (demo_dir / "report.md").read_text() + html_line


@pytest.mark.parametrize("argv", [["--alpha", "2", "x"], ["--alpha", "abc", "x"], []])
def test_main_bad_options_exit_2(argv, capsys):
    assert main(argv) == 2


def test_main_missing_directory_exits_2(tmp_path, capsys):
    assert main([str(tmp_path / "absent")]) == 2
    assert "does not exist" in capsys.readouterr().err


def test_main_no_usable_records_exits_2(tmp_path, capsys):
    (tmp_path / "records").mkdir()
    (tmp_path / "records" / "junk.json").write_text("[]")
    assert main([str(tmp_path)]) == 2
    err = capsys.readouterr().err
    assert "no usable run records" in err and "junk.json" in err
    with pytest.raises(ReportInputError):
        build_report(tmp_path)


def test_build_rejects_bad_alpha(demo_dir):
    with pytest.raises(ValueError, match="alpha"):
        build_report(demo_dir, alpha=0.0)
