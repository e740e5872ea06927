"""The statistics core imports without the terminal UI library.

The project's rule (tui/cli.py docstring: "Textual is imported only by review"): foldsift.stats
must stay usable headless. No outside source; this checks the project's own design.
"""

from __future__ import annotations

import pkgutil
import subprocess
import sys

import foldsift.stats

SUBMODULES = sorted(
    f"foldsift.stats.{info.name}" for info in pkgutil.iter_modules(foldsift.stats.__path__)
)

PROBE = """
import importlib, sys
names = sys.argv[1:]
for name in ["foldsift.stats", *names]:
    importlib.import_module(name)
loaded = sorted(m for m in sys.modules if m == "textual" or m.startswith("textual"))
print("textual modules:", loaded)
assert not loaded, loaded
assert not any(m == "statsmodels" or m.startswith("statsmodels.") for m in sys.modules)
assert not any(m == "hypothesis" or m.startswith("hypothesis.") for m in sys.modules)
"""


def test_there_are_submodules_to_check():
    """The list below is discovered, not typed in; make sure discovery found the core."""
    for name in ("load", "multiplicity", "policy", "scan", "summaries", "ttest"):
        assert f"foldsift.stats.{name}" in SUBMODULES


def test_stats_does_not_import_textual_or_test_libraries():
    """In a fresh interpreter, importing foldsift.stats and every submodule loads no module
    named textual (or textual.*), and none of the test-only libraries (statsmodels,
    hypothesis)."""
    done = subprocess.run(
        [sys.executable, "-c", PROBE, *SUBMODULES],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert done.returncode == 0, done.stdout + done.stderr
    assert "textual modules: []" in done.stdout


def test_scan_command_does_not_import_textual(tmp_path):
    """The headless `foldsift scan` path (tui/cli.py) runs without importing textual."""
    data = tmp_path / "two.csv"
    data.write_text("site,value\na,1.5\na,2.5\nb,3.5\nb,4.5\n")
    probe = (
        "import sys\n"
        "from foldsift.tui.cli import main\n"
        f"code = main(['scan', {str(data)!r}, '--out', {str(tmp_path / 'out.csv')!r}])\n"
        "assert code == 0, code\n"
        "loaded = [m for m in sys.modules if m == 'textual' or m.startswith('textual')]\n"
        "assert not loaded, loaded\n"
    )
    done = subprocess.run(
        [sys.executable, "-c", probe], capture_output=True, text=True, timeout=120
    )
    assert done.returncode == 0, done.stdout + done.stderr
    assert (tmp_path / "out.csv").is_file()


# -- the core computes; writing files, SQLite and user folders live in foldsift.tui ----------

#: Calls that write or change files, or process-wide file state (the project's own rule).
_WRITING_CALLS = {
    "write_csv",
    "write_parquet",
    "write_json",
    "write_ipc",
    "write_text",
    "write_bytes",
    "sink_csv",
    "sink_parquet",
    "umask",
    "chmod",
    "fsync",
    "replace",
    "rename",
    "unlink",
    "mkdir",
    "mkstemp",
    "NamedTemporaryFile",
}
_FORBIDDEN_IMPORTS = {"sqlite3", "tempfile", "shutil", "textual"}


def _stats_sources():
    import pathlib

    folder = pathlib.Path(foldsift.stats.__file__).parent
    return sorted(folder.glob("*.py"))


def test_stats_sources_neither_write_files_nor_import_storage_modules():
    """Static check of every module in foldsift.stats: no import of sqlite3, tempfile,
    shutil or textual, no call that writes a file or changes the umask, and no open() in a
    writing mode. (str.replace is allowed: only calls on os/pathlib-like names count.)"""
    import ast

    problems = []
    for path in _stats_sources():
        tree = ast.parse(path.read_text(), filename=str(path))
        for node in ast.walk(tree):
            if isinstance(node, ast.Import | ast.ImportFrom):
                names = [a.name for a in node.names] if isinstance(node, ast.Import) else []
                names.append(getattr(node, "module", None) or "")
                bad = {n.split(".")[0] for n in names} & _FORBIDDEN_IMPORTS
                if bad:
                    problems.append(f"{path.name}:{node.lineno} imports {sorted(bad)}")
            if isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute):
                owner = node.func.value
                owner_name = owner.id if isinstance(owner, ast.Name) else ""
                attribute = node.func.attr
                if attribute in {"replace", "rename", "unlink", "mkdir"} and owner_name not in (
                    "os",
                    "shutil",
                    "Path",
                ):
                    continue  # str.replace, Series.replace, frame.rename
                if attribute in _WRITING_CALLS:
                    problems.append(f"{path.name}:{node.lineno} calls .{attribute}()")
            if isinstance(node, ast.Call) and getattr(node.func, "id", "") == "open":
                modes = [a.value for a in node.args[1:2] if isinstance(a, ast.Constant)]
                if any(set(str(m)) & set("wax+") for m in modes):
                    problems.append(f"{path.name}:{node.lineno} opens a file for writing")
    assert problems == [], problems


AUDIT_PROBE = """
import os, sys
writes = []
def hook(event, args):
    if event == "open" and args[1] is not None and set(str(args[1])) & set("wax+"):
        writes.append((event, args[0]))
    elif event == "open" and isinstance(args[2], int) and args[2] & (os.O_WRONLY | os.O_RDWR):
        writes.append((event, args[0]))
    elif event in ("os.rename", "os.remove", "os.mkdir", "os.chmod", "shutil.copyfile"):
        writes.append((event, args[0]))
sys.addaudithook(hook)
from foldsift.stats.load import load_table
from foldsift.stats.robust import robust_all
from foldsift.stats.scan import ScanSettings, run_scan
result = run_scan(load_table(sys.argv[1]), ScanSettings(within="season"))
robust_all(result, resamples=200)
import sqlite3_absent_check  # noqa
"""


def test_a_scan_writes_no_file_and_opens_no_database(tmp_path):
    """At run time: loading, scanning within strata and cross-checking a table writes no
    file (Python's audit hooks, PEP 578, see every open() and os-level file change) and
    loads no sqlite3 module."""
    data = tmp_path / "t.csv"
    rows = ["site,season,lead"] + [
        f"{s},{season},{1.3 * v % 7 + 0.5:.2f}"
        for s, season, v in zip(
            "abab" * 6, ["dry", "dry", "wet", "wet"] * 6, range(1, 25), strict=True
        )
    ]
    data.write_text("\n".join(rows) + "\n")
    probe = AUDIT_PROBE.replace(
        "import sqlite3_absent_check  # noqa",
        "print('writes:', writes)\nprint('sqlite3' in sys.modules)\n",
    )
    done = subprocess.run(
        [sys.executable, "-c", probe, str(data)], capture_output=True, text=True, timeout=120
    )
    assert done.returncode == 0, done.stderr
    assert done.stdout.splitlines() == ["writes: []", "False"], done.stdout
    assert sorted(p.name for p in tmp_path.iterdir()) == ["t.csv"]


HELP_PROBE = """
import sys
from foldsift.tui import cli
for words in (["--help"], ["scan", "--help"], ["review", "--help"], ["export", "--help"]):
    try:
        cli.main(words)
    except SystemExit:
        pass
heavy = sorted(
    m for m in sys.modules
    if m.split(".")[0] in {"numpy", "polars", "scipy", "textual", "pint", "pandas"}
)
print("heavy modules:", heavy[:5])
assert not heavy, heavy
"""


def test_help_imports_nothing_heavy():
    """`foldsift --help` and each command's help load none of numpy, polars, scipy, pint,
    pandas or Textual (the project's start-up rule: import only what a command needs; the
    time this saves is measured in tests/bench_scale.py, not here)."""
    done = subprocess.run(
        [sys.executable, "-c", HELP_PROBE], capture_output=True, text=True, timeout=120
    )
    assert done.returncode == 0, done.stdout + done.stderr
    assert "usage: foldsift" in done.stdout
