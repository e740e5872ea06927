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
