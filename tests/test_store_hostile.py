"""Hostile bundles and store faults (issue 12, round two): nothing lost, nobody in.

- Bundles are bounded by rows as well as bytes and read in chunks: a bundle of about 1 MB that
  unpacks to hundreds of MB of short rows is refused under an address-space limit (run in a
  subprocess, so a regression fails with MemoryError instead of swapping).
- A bundle never changes the demonstration status of stored machines, and replacing a machine
  is said and confirmed.
- Store faults (a full disk, a read-only file, a damaged file, a folder that is not writable)
  are the engine's messages, and what was stored before is kept.
- Damaged values of a bundle are refused naming the member, the row and the column.
- The manifest names only known time zones; the member-count message states the real limit.
"""

import io
import json
import os
import shutil
import subprocess
import sys
import tempfile
import zipfile
from pathlib import Path

import pandas as pd
import pytest

import engine.store.bundle as bundle_module
import engine.store.sqlite as store_module
from engine.columns import READING_COLUMNS
from engine.errors import InputError
from engine.machines import parse_machines_text
from engine.readings import MAX_ROWS
from engine.store import IMPORT_ID, MAX_BUNDLE_MEMBERS, open_store
from tests.helpers.store_worker import make_readings
from tests.test_store import MACHINES_TEXT, filled_store, stored_readings, zip_of

ROOT = Path(__file__).resolve().parents[1]
NOBODY = 65534  # the unprivileged user id of Debian-like systems (from memory)


@pytest.fixture
def machine_file():
    return parse_machines_text(MACHINES_TEXT)


@pytest.fixture
def store(tmp_path):
    with open_store(tmp_path / "lab.sqlite3") as opened:
        yield opened


def members_of(data):
    with zipfile.ZipFile(io.BytesIO(data)) as bundle:
        return {name: bundle.read(name) for name in bundle.namelist()}


def state_of(store):
    """Everything a refused import must leave as it was."""
    return (store.counts(), store.imports().to_dict("list"), store.machines(),
            stored_readings(store).to_dict("list"))


# --- 1. rows as well as bytes, read in chunks ----------------------------------------------------
HOSTILE_IMPORT = r"""
import resource, sys
from pathlib import Path
from engine.errors import InputError
from engine.store import open_store

status = Path("/proc/self/status").read_text()
size_kb = int(next(line for line in status.splitlines() if line.startswith("VmSize:")).split()[1])
limit = size_kb * 1024 + int(sys.argv[3])
resource.setrlimit(resource.RLIMIT_AS, (limit, limit))
data = Path(sys.argv[2]).read_bytes()
with open_store(sys.argv[1]) as store:
    try:
        store.import_bundle(data)
    except InputError as error:
        print("refused:", error)
    else:
        print("imported")
    print("readings stored:", store.counts()["readings"])
"""
#: Memory the import may take above what the interpreter had once its modules were loaded
#: [bytes]; the readings of a 300 MB CSV read whole need several GB.
HEADROOM_BYTES = 600 * 2**20


def hostile_bundle(path, manifest_rows, unpacked_bytes=300 * 2**20):
    """A bundle of about 1 MB whose readings.csv unpacks to ``unpacked_bytes`` of short rows.

    Returns the number of rows it holds.
    """
    row = "1,1,m,s" + "," * (len(READING_COLUMNS) - 3) + "\n"  # empty time and values
    block = (row * (2**20 // len(row))).encode()
    repeats = unpacked_bytes // len(block)
    rows = repeats * (len(block) // len(row))
    manifest = {
        "format": "ceiling-lab-bundle", "version": 1, "schema_version": 4,
        "counts": {"machines": 0, "imports": 1, "readings": manifest_rows, "environment": 0},
        "demo_machines": [], "demo_site": False,
        "imports": [{"id": 1, "name": "many", "source": "", "created_at": "2024-01-01",
                     "is_demo": False, "rows": manifest_rows, "environment_rows": 0,
                     "time_dtype": "datetime64[ns]",
                     "environment_time_dtype": "datetime64[ns]"}],
    }
    with zipfile.ZipFile(path, "w", compression=zipfile.ZIP_DEFLATED, compresslevel=9) as zipped:
        zipped.writestr("manifest.json", json.dumps(manifest))
        zipped.writestr("machines.toml", "")
        with zipped.open("readings.csv", "w", force_zip64=True) as member:
            member.write((",".join([IMPORT_ID, *READING_COLUMNS]) + "\n").encode())
            for _ in range(repeats):
                member.write(block)
    return rows


def import_under_memory_limit(store_path, bundle_path):
    return subprocess.run(
        [sys.executable, "-c", HOSTILE_IMPORT, str(store_path), str(bundle_path),
         str(HEADROOM_BYTES)], cwd=ROOT, capture_output=True, text=True, timeout=600,
        env={**os.environ, "PYTHONPATH": str(ROOT)})


@pytest.mark.parametrize("claimed", ["few", "all"])
def test_a_small_bundle_of_millions_of_short_rows_is_refused_in_flat_memory(tmp_path, claimed):
    bundle_path = tmp_path / "hostile.zip"
    rows = hostile_bundle(bundle_path, manifest_rows=10)
    if claimed == "all":  # the manifest honest: more rows than an import may hold
        hostile_bundle(bundle_path, manifest_rows=rows)
    assert bundle_path.stat().st_size < 2 * 2**20 and rows > MAX_ROWS
    done = import_under_memory_limit(tmp_path / "lab.sqlite3", bundle_path)
    assert done.returncode == 0, done.stderr[-2000:]  # a MemoryError ends it with 1
    assert "refused: bundle" in done.stdout, done.stdout
    expected = ("more rows than the manifest counts" if claimed == "few"
                else f"more than the {MAX_ROWS:,}")
    assert expected in done.stdout
    assert "readings stored: 0" in done.stdout


def test_an_import_of_more_readings_than_the_reader_allows_is_refused(store, machine_file,
                                                                      tmp_path, monkeypatch):
    filled_store(store, machine_file)  # 700 readings in its first import, 200 in the second
    data = store.export_bundle()
    monkeypatch.setattr(bundle_module, "MAX_ROWS", 500)
    with open_store(tmp_path / "other.sqlite3") as other:
        with pytest.raises(InputError, match=r"import 1 \('aware'\), key 'rows': 700 rows, "
                                             r"more than the 500"):
            other.import_bundle(data)
        assert other.is_empty()


def test_a_bundle_is_written_in_chunks_in_one_transaction(store, machine_file, tmp_path,
                                                          monkeypatch):
    """Law: read in chunks, stored whole or not at all (a chunk failing half-way stores none)."""
    first, second, aware, naive = filled_store(store, machine_file)
    data = store.export_bundle()
    monkeypatch.setattr(bundle_module, "BUNDLE_CHUNK_ROWS", 64)
    chunks = []
    real_insert = store_module._insert_chunk

    def counting(connection, statement, rows):
        rows = list(rows)
        chunks.append(len(rows))
        if len(chunks) == 9:
            raise OSError("the disk went away")
        real_insert(connection, statement, rows)

    monkeypatch.setattr(store_module, "_insert_chunk", counting)
    with open_store(tmp_path / "other.sqlite3") as other:
        with pytest.raises(OSError):
            other.import_bundle(data)
        assert other.is_empty() and other.counts()["readings"] == 0
        assert max(chunks) <= 64
        monkeypatch.setattr(store_module, "_insert_chunk", real_insert)
        new_ids = other.import_bundle(data)
        pd.testing.assert_frame_equal(stored_readings(other, import_ids=[new_ids[0]]), aware,
                                      check_exact=True)
        pd.testing.assert_frame_equal(stored_readings(other, import_ids=[new_ids[1]]), naive,
                                      check_exact=True)
        assert other.imports()["machines"].tolist() == store.imports()["machines"].tolist()


# --- 2. demonstration status and replaced machines ------------------------------------------------
OTHER_STACK = """
[[machine]]
id = "stack"
carrier = "disc"
outer_diameter = "60 cm"
inner_diameter = "20 cm"
carriers = 4
"""


def bundle_from_another_lab(tmp_path, machine_file, demo_all):
    """A bundle whose lab describes 'stack' differently and marks every machine as demo."""
    with open_store(tmp_path / "theirs.sqlite3") as theirs:
        theirs.save_machine(machine_file.machines[1], demo=demo_all)  # school-belt, the same
        theirs.save_machine(parse_machines_text(OTHER_STACK).machines[0], demo=demo_all)
        theirs.import_readings(make_readings(50, seed=3), "theirs")
        return theirs.export_bundle()


def test_a_bundle_never_marks_stored_machines_as_demonstration_data(tmp_path, store,
                                                                   machine_file):
    for machine in machine_file.machines:
        store.save_machine(machine)  # the user's own
    data = bundle_from_another_lab(tmp_path, machine_file, demo_all=True)
    store.import_bundle(data, replace_machines=True)
    removed = store.remove_demo()
    assert removed["machines"] == 0  # school-belt and stack were the user's before
    assert [machine.id for machine in store.machines().machines] == [
        "twin-disc", "school-belt", "stack"]


def test_replacing_machines_is_said_and_confirmed(tmp_path, store, machine_file):
    for machine in machine_file.machines:
        store.save_machine(machine)
    data = bundle_from_another_lab(tmp_path, machine_file, demo_all=False)
    before = state_of(store)
    preview = store.bundle_preview(data)
    assert preview["replaced"] == ["stack"]  # school-belt is the same: nothing to replace
    assert preview["imports"] == 1 and preview["readings"] == 50
    with pytest.raises(InputError, match=r"would replace 1 machine\(s\).*: stack; nothing was "
                                         "imported"):
        store.import_bundle(data)
    assert state_of(store) == before
    store.import_bundle(data, replace_machines=True)
    assert store.machines().by_id()["stack"].spec["outer_diameter"] == "60 cm"


def test_a_bundle_of_the_same_machines_asks_nothing(store, machine_file):
    first, second, aware, naive = filled_store(store, machine_file)
    data = store.export_bundle(import_ids=[second])
    assert store.bundle_preview(data)["replaced"] == []
    assert store.import_bundle(data) == []  # the same machines: nothing is replaced
    assert store.counts()["imports"] == 2  # and its import is there already: not added twice


# --- 3. store faults -----------------------------------------------------------------------------
def test_a_full_disk_is_a_message_and_keeps_what_was_stored(store, machine_file):
    """A store that cannot grow (SQLite's max_page_count, as a full disk) refuses the import."""
    first, second, aware, naive = filled_store(store, machine_file)
    pages = store._connection.execute("PRAGMA page_count").fetchone()[0]
    store._connection.execute(f"PRAGMA max_page_count = {pages + 2}")
    with pytest.raises(InputError, match="the disk is full.*Free space on the disk"):
        store.import_readings(make_readings(50_000, seed=9), "too much")
    pd.testing.assert_frame_equal(stored_readings(store, import_ids=[first]), aware,
                                  check_exact=True)
    assert store.counts()["imports"] == 2


FILE_SIZE_LIMITED = r"""
import resource, signal, sys
from engine.errors import InputError
from engine.store import open_store
from tests.helpers.store_worker import make_readings

signal.signal(signal.SIGXFSZ, signal.SIG_IGN)  # the write fails (EFBIG) instead of killing
resource.setrlimit(resource.RLIMIT_FSIZE, (4 * 2**20, 4 * 2**20))
with open_store(sys.argv[1]) as store:
    try:
        store.import_readings(make_readings(200_000, seed=2), "too much")
    except InputError as error:
        print("refused:", error)
"""


def test_a_file_system_that_is_full_is_a_message_and_keeps_what_was_stored(tmp_path):
    path = tmp_path / "lab.sqlite3"
    with open_store(path) as store:
        first = store.import_readings(make_readings(300, seed=1), "kept")
    done = subprocess.run([sys.executable, "-c", FILE_SIZE_LIMITED, str(path)], cwd=ROOT,
                          capture_output=True, text=True, timeout=300,
                          env={**os.environ, "PYTHONPATH": str(ROOT)})
    assert "refused:" in done.stdout, done.stderr[-2000:]
    assert "disk may be full" in done.stdout or "the disk is full" in done.stdout
    with open_store(path) as store:
        assert store.counts()["imports"] == 1
        pd.testing.assert_frame_equal(stored_readings(store, import_ids=[first]),
                                      make_readings(300, seed=1), check_exact=True)


AS_ANOTHER_USER = r"""
import os, sys
from engine.errors import InputError
from engine.store import open_store
from tests.helpers.store_worker import make_readings

frame = make_readings(10, seed=2)
if os.geteuid() == 0:  # root may write anything: drop to an ordinary user, modules loaded
    os.setgid(int(sys.argv[2]))
    os.setuid(int(sys.argv[2]))
try:
    with open_store(sys.argv[1]) as store:
        store.import_readings(frame, "more")
    print("stored")
except InputError as error:
    print("refused:", error)
"""


def run_without_privileges(path):
    """Open the store and import as a user who is not its owner (nobody, when run as root)."""
    return subprocess.run([sys.executable, "-c", AS_ANOTHER_USER, str(path), str(NOBODY)],
                          cwd=ROOT, capture_output=True, text=True, timeout=120,
                          env={**os.environ, "PYTHONPATH": str(ROOT)})


@pytest.fixture
def shared_folder():
    """A folder outside pytest's private one, so that another user can reach it."""
    folder = Path(tempfile.mkdtemp(prefix="ceiling-lab-faults-"))
    folder.chmod(0o755)
    yield folder
    shutil.rmtree(folder, ignore_errors=True)


def give_to_the_test_user(path):
    if os.geteuid() == 0:
        os.chown(path, NOBODY, NOBODY)


def test_a_read_only_store_file_is_a_message_and_keeps_what_was_stored(shared_folder):
    folder = shared_folder / "lab"
    folder.mkdir()
    path = folder / "lab.sqlite3"
    with open_store(path) as store:
        store.import_readings(make_readings(20, seed=1), "kept")
    give_to_the_test_user(folder)  # the folder is theirs, the file only readable
    folder.chmod(0o755)
    path.chmod(0o444)
    done = run_without_privileges(path)
    assert "refused:" in done.stdout, (done.stdout, done.stderr[-2000:])
    assert "read-only" in done.stdout and "permissions" in done.stdout
    path.chmod(0o644)
    with open_store(path) as store:
        assert store.counts() == {"machines": 0, "imports": 1, "sessions": 2, "readings": 20}


def test_a_folder_that_is_not_writable_is_told_as_exactly_that(shared_folder):
    folder = shared_folder / "locked"
    folder.mkdir()
    folder.chmod(0o555)  # nobody but root may write in it
    done = run_without_privileges(folder / "lab.sqlite3")
    assert "refused:" in done.stdout, (done.stdout, done.stderr[-2000:])
    assert "folder is not writable" in done.stdout
    assert "not a Ceiling Lab store" not in done.stdout
    folder.chmod(0o755)
    with open_store(folder / "existing.sqlite3") as store:  # a store there already
        store.import_readings(make_readings(20, seed=1), "kept")
    folder.chmod(0o555)
    done = run_without_privileges(folder / "existing.sqlite3")
    assert "folder is not writable" in done.stdout or "read-only" in done.stdout, done.stdout
    folder.chmod(0o755)


def test_a_damaged_store_is_a_message_that_says_to_restore_a_bundle(tmp_path):
    path = tmp_path / "lab.sqlite3"
    with open_store(path) as store:
        store.import_readings(make_readings(5_000, seed=1), "kept")
    size = path.stat().st_size
    with open(path, "r+b") as file:  # overwrite the middle of the file
        file.seek(size // 3)
        file.write(b"\xa5" * (size // 3))
    with pytest.raises(InputError, match="the store file is damaged.*lab bundle"):
        with open_store(path) as store:
            store.readings()


# --- 4. damaged values ---------------------------------------------------------------------------
def replace_cell(csv_bytes, column, value, row=1):
    """The CSV with one cell (data row ``row``, counted from 1) replaced by ``value``."""
    table = pd.read_csv(io.BytesIO(csv_bytes), dtype=str, keep_default_na=False)
    table.loc[row - 1, column] = value
    return table.to_csv(index=False, lineterminator="\n").encode()


@pytest.mark.parametrize(("column", "value", "message"), [
    ("time", "3000-01-01T00:00:00+00:00", r"readings\.csv, row 5, column 'time': "
                                          r"'3000-01-01T00:00:00\+00:00' is not a time in the "
                                          "years 1677 to 2262"),
    ("time", "1500-01-01T00:00:00+00:00", r"row 5, column 'time'"),
    ("row", "99999999999999999999", r"readings\.csv, row 5, column 'row': "
                                    r"'99999999999999999999' is not a whole number"),
    ("row", "9007199254740993", r"row 5, column 'row'"),  # 2**53 + 1
    ("import_id", "1" + "0" * 30, r"readings\.csv, row 5, column 'import_id'"),
])
def test_damaged_values_are_refused_naming_member_row_and_column(tmp_path, store, machine_file,
                                                                 column, value, message):
    filled_store(store, machine_file)
    members = members_of(store.export_bundle())
    members["readings.csv"] = replace_cell(members["readings.csv"], column, value, row=5)
    with open_store(tmp_path / "other.sqlite3") as other:
        with pytest.raises(InputError, match=message):
            other.import_bundle(zip_of(members))
        assert other.is_empty()


@pytest.mark.parametrize("import_id", [10**30, -1, 2**53])
def test_a_huge_import_id_in_the_manifest_is_refused_naming_it(tmp_path, store, machine_file,
                                                               import_id):
    filled_store(store, machine_file)
    members = members_of(store.export_bundle())
    manifest = json.loads(members["manifest.json"])
    manifest["imports"][1]["id"] = import_id
    members["manifest.json"] = json.dumps(manifest).encode()
    with open_store(tmp_path / "other.sqlite3") as other:
        with pytest.raises(InputError, match=r"manifest\.json, import 2, key 'id': .* is not "
                                             "an import id the store can hold"):
            other.import_bundle(zip_of(members))
        assert other.is_empty()


# --- 5. time zones and the member count ----------------------------------------------------------
@pytest.mark.parametrize("dtype", [
    "datetime64[ns, dateutil//usr/share/zoneinfo/UTC]",
    "datetime64[ns, /etc/localtime]",
    "datetime64[ns, ../../etc/localtime]",
    "datetime64[ns, Nowhere/Atlantis]",
])
def test_the_manifest_names_only_known_time_zones(tmp_path, store, machine_file, dtype):
    filled_store(store, machine_file)
    members = members_of(store.export_bundle())
    manifest = json.loads(members["manifest.json"])
    manifest["imports"][0]["time_dtype"] = dtype
    members["manifest.json"] = json.dumps(manifest).encode()
    with open_store(tmp_path / "other.sqlite3") as other:
        with pytest.raises(InputError, match="known time zone|not a time dtype"):
            other.import_bundle(zip_of(members))
        assert other.is_empty()


def test_known_time_zones_still_travel(tmp_path, store):
    frame = make_readings(30, seed=4)
    frame["time"] = frame["time"].dt.tz_convert("Europe/Paris")
    store.import_readings(frame, "paris")
    with open_store(tmp_path / "other.sqlite3") as other:
        (new_id,) = other.import_bundle(store.export_bundle())
        pd.testing.assert_frame_equal(stored_readings(other, import_ids=[new_id]), frame,
                                      check_exact=True)


def test_the_member_count_message_states_the_real_limit(store, machine_file):
    filled_store(store, machine_file)
    members = members_of(store.export_bundle())
    extra = {f"extra{number}.csv": b"" for number in range(MAX_BUNDLE_MEMBERS)}
    with pytest.raises(InputError, match=f"at most {MAX_BUNDLE_MEMBERS}$"):
        store.import_bundle(zip_of({**members, **extra}))


def test_the_address_space_limit_of_the_hostile_import_is_real():
    """The limit the hostile import runs under stops a large allocation (so it can fail)."""
    script = ("import resource, sys\n"
              "resource.setrlimit(resource.RLIMIT_AS, (2**31, 2**31))\n"
              "try:\n    bytearray(3 * 2**30)\nexcept MemoryError:\n    print('limited')\n")
    done = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True,
                          timeout=60)
    assert done.stdout.strip() == "limited"
