"""chimeline batch on the command line: a bad manifest, a row whose config does not resolve, or an unwritable
output folder is exit 2 with one line naming the file and the row, before any cluster starts and with nothing
written. (Runs on real clusters, exit codes 0 and 3: tests/workflows/test_batch.py.)"""
import pytest
from click.testing import CliRunner

from tests.helpers import assert_fails, cli_output


def _one_error_line(r) -> str:
    lines = [ln for ln in cli_output(r).splitlines() if ln.strip()]
    assert len(lines) == 1, lines
    assert lines[0].startswith("chimeline: error: ")
    return lines[0]


@pytest.mark.parametrize("body, phrase", [
    ("scan,tag,survey_date,colour\na.las,A,2024-01-01,red\n", "line 1: unknown column or key 'colour'"),
    ("scan,tag,survey_date\na.las,A,2024-13-01\n", "line 2: 'survey_date' must be a date YYYY-MM-DD"),
    ("scan,tag,survey_date,set\na.las,A,2024-01-01,profile.bin_width_deg=-1\n",
     "'profile.bin_width_deg' must be a number in [0.05, 45.0], got -1.0"),
    ("scan,tag,survey_date,config\na.las,A,2024-01-01,nowhere.yaml\n", "line 2: config file not found"),
])
def test_bad_manifest_is_exit_2_with_one_line_and_nothing_written(tmp_path, body, phrase):
    m = tmp_path / "fleet.csv"
    m.write_text(body)
    out = tmp_path / "out"
    r = assert_fails(["batch", m, "--out", out], phrase, out)
    line = _one_error_line(r)
    assert str(m) in line
    assert not out.exists()


def test_missing_manifest_and_output_inside_a_file(tmp_path):
    assert_fails(["batch", tmp_path / "none.yaml", "--out", tmp_path / "o"], "batch manifest not found")
    m = tmp_path / "fleet.yaml"
    m.write_text("jobs:\n  - {scan: a.las, tag: A, survey_date: 2024-01-01}\n")
    f = tmp_path / "file"
    f.write_text("x")
    r = assert_fails(["batch", m, "--out", f / "out"], "output path is inside a file")
    _one_error_line(r)


def test_help_documents_the_exit_codes():
    from chimeline.cli import cli

    r = CliRunner().invoke(cli, ["batch", "--help"])
    assert r.exit_code == 0
    text = " ".join(r.output.split())
    assert "0 all jobs done or skipped" in text and "3 some jobs failed" in text and "2 bad manifest" in text
    assert "--scheduler" in text and "--workers" in text and "--retries" in text and "--force" in text
