"""The newcomer's path: the README's commands are the ones CI runs, its examples are true."""

import re
import shlex
import subprocess
from pathlib import Path

from engine.__main__ import main

ROOT = Path(__file__).resolve().parents[1]
README = (ROOT / "README.md").read_text(encoding="utf-8")


def bash_blocks(text):
    return re.findall(r"```bash\n(.*?)```", text, flags=re.S)


def test_ci_runs_the_readme_test_command():
    test_command = bash_blocks(README)[1].strip()
    assert "pytest" in test_command
    ci_lines = (ROOT / ".ci" / "run").read_text(encoding="utf-8").splitlines()
    assert test_command in ci_lines


def test_readme_quick_tour_output_is_what_the_command_prints(capsys):
    command = bash_blocks(README)[2].replace("\\\n", " ")
    argv = shlex.split(command)
    assert argv[:3] == [".venv/bin/python", "-m", "engine"]
    assert main(argv[3:]) == 0
    printed = capsys.readouterr().out.strip()
    shown = re.search(r"```text\nCeiling of(.*?)```", README, flags=re.S).group(0)
    assert printed == shown.removeprefix("```text\n").removesuffix("```").strip()


def test_top_level_holds_only_the_agreed_files():
    allowed = {"README.md", "DEVELOPERS.md", "requirements.txt", "app.py", "engine", "pages",
               "tests", "sample_data", "LICENSE", "pyproject.toml", ".ci", ".streamlit",
               ".gitignore"}
    tracked = subprocess.run(["git", "ls-files"], cwd=ROOT, capture_output=True, text=True,
                             check=True).stdout.split()
    present = {name.split("/")[0] for name in tracked}
    assert present <= allowed, present - allowed
