"""Nothing lost, nothing hidden: broken inputs get one clear line and exit 2; the output folder survives
every fault (foreign folders, concurrent runs, signals, dead workers, half-done swaps, no room)."""

import json
import os
import shutil
import signal
import subprocess
import sys
import time
import warnings
from importlib import resources
from pathlib import Path

import pytest
from click.testing import CliRunner

from nfmap import cli, outfolder, records, site

BROKEN = sorted((Path(__file__).parent / "broken").glob("*.toml"))
DEMO = str(resources.files("nfmap").joinpath("examples", "demo.toml"))


def _stderr(result) -> str:
    try:
        return result.stderr
    except ValueError:  # older click: mixed into output
        return result.output


@pytest.mark.parametrize("path", BROKEN, ids=[p.stem for p in BROKEN])
def test_broken_site_file_is_refused_in_one_line(path):
    expect = path.read_text().splitlines()[0].removeprefix("# expect: ").strip()
    with warnings.catch_warnings():
        warnings.simplefilter("always")  # the CLI shows warnings as lines; here they must not become errors
        r = CliRunner().invoke(cli.main, ["check", str(path)])
    err = _stderr(r)
    assert r.exit_code == 2, err
    assert expect in err, err
    assert "Traceback" not in err and "Traceback" not in r.output
    errors = [ln for ln in err.splitlines() if ln.startswith("nfmap: error:")]
    assert errors and all(str(path) in ln for ln in errors)


def test_map_file_names_are_unique_and_readable():
    names = ["20 m CW", "20 m/CW", "combined", "Сорок метров", "Двадцать", "40 m phone"]
    files = [records.map_name(n, names) for n in names]
    assert len(set(files)) == len(files) and "map-combined.png" not in files
    assert files[-1] == "map-40-m-phone.png"  # a name that clashes with nothing keeps its plain stem
    assert files[0].startswith("map-20-m-cw-") and files[3].startswith("map-transmission-")


def test_many_areas_parse_with_a_spatial_index():
    areas = [{"name": f"bed {i}", "polygon": [[(i % 100) * 2, (i // 100) * 2], [(i % 100) * 2 + 1.5, (i // 100) * 2],
                                             [(i % 100) * 2 + 1.5, (i // 100) * 2 + 1.5], [(i % 100) * 2, (i // 100) * 2 + 1.5]],
              "exposure": "occupational"} for i in range(10_000)]
    areas.append({"name": "all", "polygon": [[0, 0], [200, 0], [200, 200], [0, 200]]})
    doc = {"format": 1, "site": {"title": "many beds", "standard": "icnirp-2020"}, "area": areas,
           "antenna": [{"name": "d", "kind": "dipole", "position_m": [100, 100], "resonant_mhz": 14.2, "height_m": 10}],
           "transmission": [{"name": "t", "antenna": "d", "frequency_mhz": 14.2, "power_w": 100, "mode": "cw"}]}
    with warnings.catch_warnings(record=True):
        warnings.simplefilter("always")
        s = site.parse(doc, "many.toml")
    assert len(s.areas) == 10_001
    assert len(s.warnings) == 4 and "more pairs" in s.warnings[-1]  # summarised, not 10,000 lines


# -- the output folder ----------------------------------------------------------------------------


def _record(folder: Path, text: str = "old") -> Path:
    return records.write_folder(folder, True, lambda f: (f / "results.json").write_text(text))


def test_force_never_deletes_a_foreign_folder(tmp_path):
    proj = tmp_path / "proj"
    proj.mkdir()
    (proj / "site.toml").write_text("mine")
    (proj / "notes.txt").write_text("mine too")
    with pytest.raises(outfolder.OutputError, match="not a folder an nfmap run wrote"):
        records.write_folder(proj, True, lambda f: (f / "results.json").write_text("new"))
    assert sorted(p.name for p in proj.iterdir()) == ["notes.txt", "site.toml"]
    # a record the user added a file to is not replaced either
    rec = _record(tmp_path / "rec")
    (rec / "my-notes.txt").write_text("keep")
    with pytest.raises(outfolder.OutputError, match="my-notes.txt"):
        _record(rec, "new")
    assert (rec / "my-notes.txt").read_text() == "keep" and (rec / "results.json").read_text() == "old"


def test_force_on_the_current_folder_is_refused(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    Path("site.toml").write_text("mine")
    with pytest.raises(outfolder.OutputError):
        records.write_folder(Path("."), True, lambda f: None)
    assert Path("site.toml").read_text() == "mine"


def test_force_replaces_an_earlier_record(tmp_path):
    rec = _record(tmp_path / "rec")
    _record(rec, "new")
    assert (rec / "results.json").read_text() == "new"
    assert outfolder.manifest(rec)["tool"] == "nfmap"
    assert not list(tmp_path.glob(".rec.*"))  # no lock, temporary or old copy left


def test_a_live_lock_refuses_and_a_stale_one_is_taken_over(tmp_path):
    out = tmp_path / "out"
    sleeper = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(30)"])
    try:
        (tmp_path / ".out.nfmap-lock").write_text(f"{sleeper.pid}\n")
        with pytest.raises(outfolder.OutputError, match=f"another nfmap run \\(process {sleeper.pid}\\)"):
            _record(out)
        assert not out.exists()
    finally:
        sleeper.kill()
        sleeper.wait()
    _record(out)  # its process is gone: the lock is stale
    assert (out / "results.json").read_text() == "old" and not (tmp_path / ".out.nfmap-lock").exists()


def test_a_folder_that_appears_while_computing_is_not_replaced(tmp_path):
    out = tmp_path / "out"
    with outfolder.reserved(out, force=False) as res:
        out.mkdir()
        (out / "theirs.txt").write_text("theirs")
        with pytest.raises(outfolder.OutputExistsError):
            res.commit(lambda f: (f / "results.json").write_text("ours"))
    assert [p.name for p in out.iterdir()] == ["theirs.txt"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out"]


def test_a_half_done_swap_is_rolled_back_or_finished(tmp_path):
    out = tmp_path / "out"
    # crash after the first rename (record -> old), before the second (new -> record), new one incomplete
    old = _record(tmp_path / "x", "old").rename(tmp_path / ".out.nfmap-old")
    partial = tmp_path / ".out.nfmap-tmp-4242"
    partial.mkdir()
    (partial / "results.json").write_text("half")
    with outfolder.reserved(out, force=True) as res:
        assert any("rolled back" in n for n in res.notes)
    assert (out / "results.json").read_text() == "old" and not partial.exists() and not old.exists()
    # the same crash with the new record complete (its manifest written): finished
    shutil.move(str(out), str(tmp_path / ".out.nfmap-old"))
    done = _record(tmp_path / "y", "new").rename(tmp_path / ".out.nfmap-tmp-4343")
    with outfolder.reserved(out, force=True) as res:
        assert any("finished" in n for n in res.notes)
    assert (out / "results.json").read_text() == "new" and not done.exists()
    assert not (tmp_path / ".out.nfmap-old").exists()


def test_stale_temporaries_of_killed_runs_are_removed(tmp_path):
    stale = tmp_path / ".out.nfmap-tmp-99999"
    stale.mkdir()
    (stale / "fields.npz").write_bytes(b"x" * 100)
    _record(tmp_path / "out")
    assert not stale.exists()


def test_unwritable_or_full_destination_is_refused_before_computing(tmp_path, monkeypatch):
    blocker = tmp_path / "a-file"
    blocker.write_text("x")
    with warnings.catch_warnings():
        warnings.simplefilter("always")
        r = CliRunner().invoke(cli.main, ["run", DEMO, "-o", str(blocker / "out"), "--quiet"])
    assert r.exit_code == 2 and "cannot create" in _stderr(r) and "Traceback" not in _stderr(r)
    monkeypatch.setattr(os, "access", lambda *a, **k: False)
    with pytest.raises(outfolder.OutputError, match="not writable"):
        _record(tmp_path / "ro")
    monkeypatch.undo()

    class Usage:
        free = 10_000

    monkeypatch.setattr(outfolder.shutil, "disk_usage", lambda p: Usage())
    with pytest.raises(outfolder.OutputError, match="MB free"):
        with outfolder.reserved(tmp_path / "full", estimate_bytes=50_000_000):
            pass
    assert not (tmp_path / "full").exists() and not (tmp_path / ".full.nfmap-lock").exists()


def test_progress_lines_without_a_terminal(capsys):
    lines = cli._Lines(1000, every_s=0.0)
    lines.update(400)
    lines.update(600)
    err = capsys.readouterr().err.splitlines()
    assert len(err) == 2 and "400 of 1,000 points (40 %)" in err[0] and "s left" in err[0]


def test_jobs_above_the_core_count_are_capped(capsys):
    assert cli._default_jobs(10_000) == (os.cpu_count() or 1)
    assert "more than the" in capsys.readouterr().err


# -- faults in a real run (subprocesses) ------------------------------------------------------------


def _start(args, cwd):
    env = dict(os.environ, PYTHONUNBUFFERED="1")
    return subprocess.Popen([sys.executable, "-m", "nfmap", *args], cwd=cwd, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, env=env)


def _wait_computing(p, timeout_s=60.0):
    """Read stderr until the near-field computation has started; return what was read."""
    seen = []
    t0 = time.monotonic()
    while time.monotonic() - t0 < timeout_s:
        line = p.stderr.readline()
        if not line:
            break
        seen.append(line)
        if "computing near fields" in line:
            return seen
    raise AssertionError("the run did not start computing: " + "".join(seen))


def _children(pid: int) -> list[int]:
    out = []
    for d in Path("/proc").iterdir():
        if d.name.isdigit():
            try:
                if int((d / "stat").read_text().rsplit(")", 1)[1].split()[1]) == pid:
                    out.append(int(d.name))
            except (OSError, IndexError, ValueError):
                pass
    return out


def _gone(pids, timeout_s=10.0) -> bool:
    t0 = time.monotonic()
    while time.monotonic() - t0 < timeout_s:
        alive = [p for p in pids if Path(f"/proc/{p}").exists() and "Z" not in _state(p)]
        if not alive:
            return True
        time.sleep(0.2)
    return False


def _state(pid: int) -> str:
    try:
        return Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except OSError:
        return "Z"


def _leftovers(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir() if ".nfmap-" in p.name)


def _workers(pid: int) -> list[int]:
    """The pool's worker processes among the children (not multiprocessing's resource tracker)."""
    out = []
    for k in _children(pid):
        try:
            cmd = Path(f"/proc/{k}/cmdline").read_bytes().replace(b"\0", b" ")
        except OSError:
            continue
        if b"spawn_main" in cmd:
            out.append(k)
    return out


def _wait_children(pid, timeout_s=20.0):
    t0 = time.monotonic()
    while time.monotonic() - t0 < timeout_s:
        kids = _workers(pid)
        if len(kids) >= 2:
            return kids
        time.sleep(0.2)
    return _workers(pid)


def test_sigterm_stops_workers_and_leaves_the_old_record(tmp_path):
    out = tmp_path / "out"
    _record(out, "earlier record")
    p = _start(["run", DEMO, "-o", str(out), "--force", "--jobs", "2"], tmp_path)
    _wait_computing(p)
    kids = _wait_children(p.pid)
    p.send_signal(signal.SIGTERM)
    _, err = p.communicate(timeout=60)
    assert p.returncode == 143 and "stopped by a signal" in err and "Traceback" not in err
    assert (out / "results.json").read_text() == "earlier record"
    assert _leftovers(tmp_path) == []
    assert kids and _gone(kids), "worker processes still running after SIGTERM"


def test_a_killed_worker_ends_in_exit_3_and_writes_nothing(tmp_path):
    out = tmp_path / "out"
    p = _start(["run", DEMO, "-o", str(out), "--jobs", "2"], tmp_path)
    _wait_computing(p)
    kids = _wait_children(p.pid)
    assert kids
    os.kill(kids[0], signal.SIGKILL)
    _, err = p.communicate(timeout=120)
    assert p.returncode == 3, err
    assert "worker process died" in err and "Traceback" not in err
    assert not out.exists() and _leftovers(tmp_path) == []


def test_a_second_run_on_the_same_folder_is_refused(tmp_path):
    out = tmp_path / "out"
    first = _start(["run", DEMO, "-o", str(out), "--jobs", "1"], tmp_path)
    try:
        _wait_computing(first)
        second = subprocess.run([sys.executable, "-m", "nfmap", "run", DEMO, "-o", str(out), "--force", "--quiet"],
                                capture_output=True, text=True, timeout=120, cwd=tmp_path)
        assert second.returncode == 2 and "another nfmap run" in second.stderr
        assert "Traceback" not in second.stderr
    finally:
        first.send_signal(signal.SIGTERM)
        first.communicate(timeout=60)
    assert not out.exists() and _leftovers(tmp_path) == []


def test_results_json_of_a_record_lists_its_files(tmp_path):
    rec = _record(tmp_path / "rec")
    doc = json.loads((rec / outfolder.MANIFEST).read_text())
    assert doc["files"] == ["results.json"] and doc["tool"] == "nfmap"


def test_unusual_values_are_warned(tmp_path):
    text = (Path(__file__).parent / "broken" / "unknown-mode.toml").read_text()
    text = text.replace('mode = "psk"', 'mode = "cw"\nfeedline_loss_db = 12').replace("power_w = 100", "power_w = 0.4")
    p = tmp_path / "odd.toml"
    p.write_text(text)
    with pytest.warns(site.SiteWarning) as got:
        site.load(p)
    said = " ".join(str(w.message) for w in got)
    assert "power_w = 0.4 W PEP is unusual" in said and "feedline_loss_db = 12 dB" in said


def test_a_record_follows_the_users_umask(tmp_path):
    old = os.umask(0o022)
    try:
        rec = _record(tmp_path / "rec")
    finally:
        os.umask(old)
    assert rec.stat().st_mode & 0o777 == 0o755  # an ordinary folder, not 0700
    assert (rec / "results.json").stat().st_mode & 0o777 == 0o644
