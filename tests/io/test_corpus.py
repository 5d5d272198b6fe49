"""Real files: every LAS/LAZ/COPC file of laspy's own test data (LAS 1.0-1.4, point formats 0-10, extra bytes,
WKT, GeoTIFF and EVLR CRS records, COPC, LAZ) ends with exit 0 or one error line, never a traceback, within a time
limit. The files are not tanks, so most end with a clean "no tank" or "absurd span" error."""
import subprocess
import sys
from concurrent.futures import ThreadPoolExecutor


from tests.helpers import laspy_corpus

TIMEOUT_S = 60


def _run(path, out):
    cmd = [sys.executable, "-m", "chimeline.cli", "-q", "run", str(path), "--out", str(out),
           "--set", "output.plots=false"]
    try:
        r = subprocess.run(cmd, capture_output=True, text=True, timeout=TIMEOUT_S)
    except subprocess.TimeoutExpired:
        return path, None, f"no end within {TIMEOUT_S} s"
    return path, r.returncode, r.stderr


def test_every_corpus_file_ends_cleanly(tmp_path):
    files = laspy_corpus()
    assert len(files) >= 15, files
    with ThreadPoolExecutor(max_workers=2) as pool:  # child processes: two at a time on two cores
        results = list(pool.map(lambda p: _run(p, tmp_path / p.name), files))
    bad = []
    for path, rc, err in results:
        lines = [ln for ln in err.splitlines() if ln.strip()]
        if rc == 0:
            ok = (tmp_path / path.name / "profile.csv").exists()
        else:
            ok = rc == 2 and len(lines) == 1 and lines[0].startswith("chimeline: error: ") and "Traceback" not in err
        if not ok:
            bad.append(f"{path.name}: exit {rc}: {err.strip()[-400:]}")
    assert not bad, "\n".join(bad)
    names = {p.name: err for p, rc, err in results}
    # facts of these files that the readers must see (checked with laspy and pyproj by hand)
    assert "simple.copc.laz" in names and "corrupt" not in names["simple.copc.laz"]
    assert "geographic" in names["simple1_4.las"]  # its EVLR WKT is a geographic system
    assert "'ft'" in names["autzen.las"]  # GeoTIFF keys: Oregon state plane in international feet
