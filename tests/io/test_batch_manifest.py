"""The batch manifest: CSV and YAML give the same jobs, paths relative to the manifest, and every mistake is one
ConfigError naming the manifest and the row."""
import re
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from chimeline.errors import ConfigError
from chimeline.io.batch_manifest import read_batch_manifest


def test_csv_and_yaml_give_the_same_jobs(tmp_path):
    (tmp_path / "sub").mkdir()
    csv_text = ("# fleet of the invented Greyhaven Marsh Terminal\n"
                "scan,tag,survey_date,config,set,kind\n"
                "scans/a.las,GM-TK-07,2024-06-15,sub/tank.yaml,output.plots=false; profile.bin_width_deg=0.5,\n"
                "surveys/b.csv,GM-TK-09,2025-01-02,,,\n"
                "/abs/c.xyz,GM-TK-10,2025-01-03,,,run\n")
    (tmp_path / "fleet.csv").write_text(csv_text)
    (tmp_path / "fleet.yaml").write_text(
        "jobs:\n"
        "  - {scan: scans/a.las, tag: GM-TK-07, survey_date: 2024-06-15, config: sub/tank.yaml,\n"
        "     set: {output.plots: false, profile.bin_width_deg: 0.5}}\n"
        "  - {scan: surveys/b.csv, tag: GM-TK-09, survey_date: '2025-01-02'}\n"
        "  - {scan: /abs/c.xyz, tag: GM-TK-10, survey_date: 2025-01-03, kind: run}\n")
    a = read_batch_manifest(tmp_path / "fleet.csv").jobs
    b = read_batch_manifest(tmp_path / "fleet.yaml").jobs
    for x, y in zip(a, b):
        assert (x.scan, x.tag, x.survey_date, x.config, x.sets, x.kind) == (y.scan, y.tag, y.survey_date, y.config,
                                                                             y.sets, y.kind)
    j0, j1, j2 = a
    assert j0.scan == tmp_path / "scans" / "a.las" and j0.config == tmp_path / "sub" / "tank.yaml"
    assert j0.sets == (("output.plots", False), ("profile.bin_width_deg", 0.5))
    assert j0.folder == "GM-TK-07/2024-06-15" and j0.kind == "run"
    assert j1.kind == "evaluate" and j1.config is None  # a CSV is a survey unless the row says run
    assert j2.scan == Path("/abs/c.xyz") and j2.kind == "run"
    # the manifest's tag and date win over the config's
    assert j0.config_sets()[-2:] == [("tank.tag", "GM-TK-07"), ("tank.survey_date", "2024-06-15")]


def test_yaml_defaults_apply_to_every_job(tmp_path):
    p = tmp_path / "m.yml"
    p.write_text("defaults: {config: c.yaml, set: [output.plots=false], kind: run}\n"
                 "jobs:\n  - {scan: a.csv, tag: A, survey_date: 2024-01-01}\n"
                 "  - {scan: b.las, tag: B, survey_date: 2024-01-01, set: [seed=3]}\n")
    a, b = read_batch_manifest(p).jobs
    assert a.kind == "run" and a.config == tmp_path / "c.yaml" and a.sets == (("output.plots", False),)
    assert b.sets == (("output.plots", False), ("seed", 3))


@pytest.mark.parametrize("body, phrase", [
    ("scan,tag\na.las,A\n", "lacks the column(s) survey_date"),
    ("scan,tag,survey_date,colour\na.las,A,2024-01-01,red\n", "unknown column or key 'colour'"),
    ("scan,tag,survey_date\na.las,A,2024-02-30\n", "line 2: 'survey_date' must be a date YYYY-MM-DD"),
    ("scan,tag,survey_date\na.las,../up,2024-02-03\n", "line 2: 'tag' names a folder"),
    ("scan,tag,survey_date\na.las,,2024-02-03\n", "line 2: 'tag' is missing"),
    ("scan,tag,survey_date,kind\na.las,A,2024-02-03,rerun\n", "line 2: 'kind' must be run or evaluate"),
    ("scan,tag,survey_date,set\na.las,A,2024-02-03,profile.bin_width_deg\n", "line 2: 'set': --set expects KEY=VALUE"),
    ("# c\nscan,tag,survey_date\na.las,A,2024-02-03\nb.las,A,2024-02-03\n",
     "line 4: tag 'A' and survey_date 2024-02-03 repeat line 3"),
    ("scan,tag,survey_date\na.las,A,2024-02-03,x,y\n", "line 2: 5 cells for 3 columns"),
    ("# only comments\n", "lists no jobs"),
])
def test_csv_mistakes_name_the_line(tmp_path, body, phrase):
    p = tmp_path / "fleet.csv"
    p.write_text(body)
    with pytest.raises(ConfigError) as e:
        read_batch_manifest(p)
    assert phrase in str(e.value) and str(p) in str(e.value)
    assert "\n" not in str(e.value)


@pytest.mark.parametrize("body, phrase", [
    ("jobs: 3\n", "'jobs' must be a list"),
    ("job: []\n", "unknown column or key 'job' (did you mean 'jobs'?)"),
    ("jobs:\n  - [a, b]\n", "job 1 (jobs[0]): must be a mapping"),
    ("jobs:\n  - {scan: a.las, tag: A, survey_date: 2024-01-01, sets: [x=1]}\n",
     "job 1 (jobs[0]): unknown column or key 'sets' (did you mean 'set'?)"),
    ("jobs:\n  - {scan: a.las, tag: A, survey_date: 2024-01-01, set: 3}\n", "'set' must be KEY=VALUE"),
    ("jobs:\n  - {scan: [a.las], tag: A, survey_date: 2024-01-01}\n", "'scan' must be text"),
    ("jobs: [\n", "not valid YAML"),
])
def test_yaml_mistakes_name_the_job(tmp_path, body, phrase):
    p = tmp_path / "fleet.yaml"
    p.write_text(body)
    with pytest.raises(ConfigError) as e:
        read_batch_manifest(p)
    assert phrase in str(e.value), str(e.value)


def test_other_files_are_refused(tmp_path):
    with pytest.raises(ConfigError, match="batch manifest not found"):
        read_batch_manifest(tmp_path / "nope.csv")
    (tmp_path / "m.txt").write_text("scan,tag,survey_date\n")
    with pytest.raises(ConfigError, match="must be .csv, .yaml or .yml"):
        read_batch_manifest(tmp_path / "m.txt")


cell = st.one_of(st.text(alphabet=st.characters(blacklist_categories=("Cs",)), max_size=12),
                 st.sampled_from(["a.las", "GM-TK-07", "2024-06-15", "run", "evaluate", "seed=3", "x=", "../t",
                                  "2024-6-1", '"', ",", ";", "#", " ", "\t"]))


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(header=st.lists(st.sampled_from(["scan", "tag", "survey_date", "config", "set", "kind", "Scan", "other"]),
                       min_size=1, max_size=6),
       rows=st.lists(st.lists(cell, max_size=7), max_size=5))
def test_any_csv_either_parses_or_is_one_config_error_line(tmp_path_factory, header, rows):
    """Whatever the table, the parser returns jobs whose fields meet the rules, or one ConfigError line naming the
    manifest; never another exception."""
    p = tmp_path_factory.mktemp("m") / "fleet.csv"
    p.write_text("\n".join([",".join(header)] + [",".join(r) for r in rows]) + "\n", encoding="utf-8")
    try:
        m = read_batch_manifest(p)
    except ConfigError as exc:
        assert "\n" not in str(exc) and str(p) in str(exc)
        return
    for j in m.jobs:
        assert j.kind in ("run", "evaluate") and j.scan.is_absolute()
        assert re.fullmatch(r"\d{4}-\d{2}-\d{2}", j.survey_date) and "/" not in j.tag and not j.tag.startswith(".")
    assert len({(j.tag, j.survey_date) for j in m.jobs}) == len(m.jobs)
