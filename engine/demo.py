"""The invented demonstration scenario of ``sample_data/``, kept as a lab of its own.

The demonstration lab is a separate store beside the user's own (``ceiling-lab-demo.sqlite3``
next to ``ceiling-lab.sqlite3``): it never mixes with the user's machines, readings or site,
closing it touches nothing of theirs, and it can always be opened again, rebuilt from
``sample_data/`` when its file is gone.
"""

from __future__ import annotations

from pathlib import Path

from engine.machines import load_machines
from engine.readings import merge_environment, read_environment, read_readings
from engine.store import Store, open_store

DEMO_FOLDER = Path(__file__).resolve().parents[1] / "sample_data"

#: Readings files of the scenario with their name in the store and their humidity log, if any.
DEMO_IMPORTS = (
    ("readings_twin_disc.csv", "Science centre twin-disc, before and after restoration", None),
    ("readings_belt.csv", "School belt machine, three student groups", None),
    ("readings_cylinder.csv", "Workshop cylinder, a damp day", "environment_cylinder.csv"),
    ("readings_stack.csv", "Six-disc stack, open day", None),
)


def demo_lab_path(own_lab_path: str | Path) -> Path:
    """Where the demonstration lab lives: beside the user's own lab, with ``-demo`` in its name.

    Parameters
    ----------
    own_lab_path : str or Path
        The user's own store file (``CEILING_LAB_DB`` or the default).

    Returns
    -------
    Path
        E.g. ``.../ceiling-lab-demo.sqlite3`` for ``.../ceiling-lab.sqlite3``.
    """
    own = Path(own_lab_path)
    return own.with_name(f"{own.stem}-demo{own.suffix or '.sqlite3'}")


def open_demo_lab(path: str | Path, folder: Path = DEMO_FOLDER) -> Store:
    """Open the demonstration lab at ``path``, loading the scenario when the lab is empty.

    Parameters
    ----------
    path : str or Path
        The demonstration lab's store file (see :func:`demo_lab_path`).
    folder : Path
        Folder of the scenario.

    Returns
    -------
    Store
        Open, holding the demonstration machines, site and readings.
    """
    store = open_store(path)
    if store.is_empty():
        load_demo(store, folder)
    return store


def load_demo(store: Store, folder: Path = DEMO_FOLDER) -> list[int]:
    """Load the demonstration machines and readings into ``store``, all marked as demo.

    Parameters
    ----------
    store : Store
        An open store.
    folder : Path
        Folder of the scenario (``sample_data/``).

    Returns
    -------
    list of int
        The new import ids.
    """
    machine_file = load_machines(folder / "machines.toml")
    for machine in machine_file.machines:
        store.save_machine(machine, demo=True)
    if machine_file.site.spec:
        store.save_site(dict(machine_file.site.spec), demo=True)
    import_ids = []
    for readings_name, title, log_name in DEMO_IMPORTS:
        frame = read_readings(folder / readings_name).frame
        environment = None
        if log_name:
            environment = read_environment(folder / log_name).frame
            frame = merge_environment(frame, environment)
        import_ids.append(store.import_readings(frame, title, source=readings_name,
                                                environment=environment, demo=True))
    return import_ids
