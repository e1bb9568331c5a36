"""``python -m engine lab ...`` on both back ends (an SQLite file and a lab on the throwaway
PostgreSQL server of tests/pg_cluster.py): show, add, export, restore and copy, benches adding
at once from separate processes, and a viewer refused with the right it lacks."""

import json
import os
import subprocess
import sys
from pathlib import Path

import pandas as pd

from engine.__main__ import main
from engine.readings import read_readings
from engine.store import IMPORT_ID, open_store

ROOT = Path(__file__).resolve().parents[1]
SAMPLE = ROOT / "sample_data"


def run(capsys, *arguments):
    status = main(list(arguments))
    out, err = capsys.readouterr()
    return status, out, err


def test_a_bench_adds_readings_and_moves_the_lab(lab_location, capsys, monkeypatch, tmp_path):
    location = lab_location()
    monkeypatch.setenv("CEILING_LAB_DB", location)
    status, out, err = run(capsys, "lab", "add", str(SAMPLE / "readings_cylinder.csv"),
                           "--environment", str(SAMPLE / "environment_cylinder.csv"),
                           "--name", "cylinder, open day")
    assert status == 0, err
    assert out.startswith("saved ") and "as import 1 in" in out
    assert "password" not in out.lower()
    status, out, err = run(capsys, "lab", "show", "--json")
    shown = json.loads(out)
    expected_rows = len(read_readings(SAMPLE / "readings_cylinder.csv").frame)
    assert shown["imports"] == 1 and shown["readings"] == expected_rows
    assert shown["may_change"] is True

    bundle = tmp_path / "lab.zip"
    assert run(capsys, "lab", "export", str(bundle))[0] == 0
    other = str(tmp_path / "copy.sqlite3")
    status, out, err = run(capsys, "lab", "copy", "--to", other)
    assert status == 0 and "copied 1 import and 0 machines" in out, err
    with open_store(location) as first, open_store(other) as second:
        pd.testing.assert_frame_equal(first.readings().drop(columns=IMPORT_ID),
                                      second.readings().drop(columns=IMPORT_ID),
                                      check_exact=True)
        pd.testing.assert_frame_equal(first.environment().drop(columns=IMPORT_ID),
                                      second.environment().drop(columns=IMPORT_ID),
                                      check_exact=True)
    status, out, err = run(capsys, "lab", "restore", str(bundle))  # the same lab: nothing new
    assert status == 0 and "added 0 imports" in out and "1 import of the bundle already" in out
    status, out, err = run(capsys, "lab", "copy", "--to", other)  # again: nothing twice
    assert "copied 0 imports" in out and "1 import already there" in out
    with open_store(location) as store, open_store(other) as second:
        assert store.counts()["imports"] == 1 and second.counts()["imports"] == 1


def test_a_viewer_is_refused_with_the_right_it_lacks(pg_cluster, pg_lab, capsys, monkeypatch):
    monkeypatch.setenv("CEILING_LAB_DB",
                       pg_cluster.url("lab_viewer", pg_lab.rsplit("/", 1)[1]))
    status, out, err = run(capsys, "lab", "show")
    assert status == 0 and "only look (read-only)" in out and "as lab_viewer" in out
    status, out, err = run(capsys, "lab", "add", str(SAMPLE / "readings_belt.csv"))
    assert status == 2
    assert err.startswith("error: ")
    assert "'lab_viewer' is read-only here (a viewer account), so it may not store readings" in err
    assert "INSERT right on the table 'imports'" in err
    assert pg_cluster.passwords["lab_viewer"] not in err + out


def test_benches_adding_from_separate_processes_at_once(pg_cluster, pg_lab):
    url = pg_cluster.url("lab_bench", pg_lab.rsplit("/", 1)[1])
    files = ["readings_belt.csv", "readings_cylinder.csv", "readings_stack.csv",
             "readings_twin_disc.csv"]
    environment = {**os.environ, "CEILING_LAB_DB": url, "PYTHONPATH": str(ROOT)}
    workers = [subprocess.Popen([sys.executable, "-m", "engine", "lab", "add",
                                 str(SAMPLE / name)], cwd=ROOT, env=environment,
                                stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
               for name in files]
    results = [worker.communicate(timeout=180) for worker in workers]
    for worker, (out, err) in zip(workers, results, strict=True):
        assert worker.returncode == 0, err
        assert out.startswith("saved ")
    with open_store(pg_lab) as store:
        imports = store.imports().set_index("source")
        assert sorted(imports.index) == sorted(files)
        for name in files:
            expected = read_readings(SAMPLE / name).frame
            assert imports.loc[name, "rows"] == len(expected)
            stored = store.readings(import_ids=[imports.loc[name, "id"]])
            assert stored["current_a"].equals(expected["current_a"].reset_index(drop=True))
