"""drawdown as a library: one import name, the README's Python example, a collector-only install.

The install test builds a fresh virtual environment and installs the project the way a user
does (``pip install`` of a copy of the tracked files, no editable mode, no extras), so it needs
the package index (or pip's cache) and takes a minute or two: marked slow.
"""

from __future__ import annotations

import contextlib
import importlib.metadata
import io
import json
import re
import shutil
import subprocess
import sys
import time
import venv
from pathlib import Path

import pytest

import drawdown
from conftest_collector import Pty, Sender, wait_for

ROOT = Path(__file__).resolve().parents[1]
HEAVY = ("dash", "plotly", "statsmodels", "pvlib", "scipy")


def _readme_python_example() -> str:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    section = text.split("## Use from Python", 1)[1]
    return re.search(r"```python\n(.*?)```", section, re.S).group(1)


def test_the_readme_example_runs_and_says_what_report_json_says(tmp_path, monkeypatch):
    from drawdown.collector.simulated import load_scenario, simulate, write_log

    scenario = load_scenario("autumn-van")
    write_log(simulate(scenario, days=3), tmp_path / "trip.csv")
    (tmp_path / "system.toml").write_text(scenario.system_text, encoding="utf-8")
    monkeypatch.chdir(tmp_path)
    out = io.StringIO()
    with contextlib.redirect_stdout(out):
        namespace: dict = {}
        exec(compile(_readme_python_example(), "README.md (Use from Python)", "exec"), namespace)
    lines = out.getvalue().splitlines()
    assert re.match(r"\d+ readings stored, 0 rejected", lines[0])
    days = [ln for ln in lines if ln.endswith("Ah used")]
    # The same answer as the command line's JSON on the same store (one answer, every face).
    from drawdown.cli import main

    cli = io.StringIO()
    with contextlib.redirect_stdout(cli):
        assert main(["--store", "readings.sqlite", "--system", "system.toml", "report", "--json"]) == 0
    report = json.loads(cli.getvalue())
    assert days == [f"{d['date']} {d['consumed_Ah']} Ah used" for d in report["days"]]
    assert namespace["advice"].to_json()["battery"] is not None
    assert namespace["run"].to_json()["fuse_A"] is not None


def test_every_public_name_exists_and_the_version_is_the_installed_one():
    assert drawdown.__all__, "the public API lists its names"
    for name in drawdown.__all__:
        assert hasattr(drawdown, name), name
    assert drawdown.__version__ == importlib.metadata.version("drawdown")
    out = subprocess.run([sys.executable, "-m", "drawdown", "--version"], capture_output=True, text=True)
    assert out.stdout.strip() == f"drawdown {drawdown.__version__}"
    assert (Path(drawdown.__file__).parent / "py.typed").is_file()


def test_the_old_top_level_names_are_not_importable():
    # A user's own analysis.py must not collide with drawdown: the package claims only `drawdown`.
    code = "import importlib.util as u; print([n for n in ('analysis', 'collector', 'dashboard') if u.find_spec(n)])"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd="/")
    assert out.stdout.strip() == "[]"


def test_a_missing_extra_names_the_extra_to_install():
    from drawdown.cli import missing_extra_message

    msg = missing_extra_message("report", ModuleNotFoundError("No module named 'statsmodels'", name="statsmodels"))
    assert "pip install 'drawdown[analysis]'" in msg and "statsmodels" in msg
    assert "drawdown[dashboard]" in missing_extra_message("serve", ModuleNotFoundError(name="dash.dcc"))
    assert missing_extra_message("report", ModuleNotFoundError(name="numpy")) is None  # a real bug: a trace


def _tracked_copy(dest: Path) -> Path:
    files = subprocess.run(["git", "ls-files"], cwd=ROOT, capture_output=True, text=True, check=True).stdout.split()
    for f in files:
        src = ROOT / f
        if src.is_file():
            (dest / f).parent.mkdir(parents=True, exist_ok=True)
            shutil.copy2(src, dest / f)
    return dest


def _rss_kib(pid: int) -> int:
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith("VmRSS:"):
            return int(line.split()[1])
    return 0


@pytest.mark.slow
def test_a_collector_only_install_collects_without_the_analysis_or_dashboard(tmp_path):
    src = _tracked_copy(tmp_path / "src")
    env_dir = tmp_path / "venv"
    venv.create(env_dir, with_pip=True)
    py = env_dir / "bin" / "python"
    pip = subprocess.run([str(py), "-m", "pip", "install", "--quiet", "--disable-pip-version-check", str(src)],
                         capture_output=True, text=True, timeout=900)
    assert pip.returncode == 0, pip.stderr[-3000:]

    # One top-level name: every file the distribution installs lies under drawdown/ (or its metadata).
    site = Path(subprocess.run([str(py), "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"],
                               capture_output=True, text=True, check=True).stdout.strip())
    record = next(site.glob("drawdown-*.dist-info")) / "RECORD"
    tops = {Path(line.split(",")[0]).parts[0] for line in record.read_text().splitlines() if line}
    assert {t for t in tops if not t.endswith(".dist-info") and t != ".."} == {"drawdown"}
    assert subprocess.run([str(py), "-c", "import drawdown"], cwd="/").returncode == 0

    probe = f"import importlib.util as u; print([n for n in {HEAVY!r} if u.find_spec(n)])"
    assert subprocess.run([str(py), "-c", probe], capture_output=True, text=True).stdout.strip() == "[]"

    exe = env_dir / "bin" / "drawdown"
    store = tmp_path / "collect.sqlite"
    port = Pty()
    sender = Sender(port, "keyvalue", rate_hz=10, garbage_every=0)
    sender.start()
    proc = subprocess.Popen([str(exe), "--store", str(store), "collect", "--serial", port.path, "--duration", "12",
                             "--json"], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, cwd=tmp_path)
    try:
        assert wait_for(lambda: store.exists(), 20)
        time.sleep(6)  # collecting steadily: its idle resident memory
        rss_kib = _rss_kib(proc.pid)
        out, err = proc.communicate(timeout=60)
    finally:
        sender.stop.set()
        port.close()
    assert proc.returncode == 0, err
    collected = json.loads(out)
    assert collected["rows_written"] > 50 and collected["channels"] == ["battery"], collected
    status = subprocess.run([str(exe), "--store", str(store), "status", "--json"], capture_output=True, text=True)
    assert status.returncode == 0, status.stderr
    assert json.loads(status.stdout)["channels"], status.stdout

    report = subprocess.run([str(exe), "--store", str(store), "report"], capture_output=True, text=True)
    assert report.returncode == 2 and "pip install 'drawdown[analysis]'" in report.stderr, report.stderr
    assert "Traceback" not in report.stderr

    size_mib = sum(f.stat().st_size for f in site.rglob("*") if f.is_file()) / 2**20
    figures = {"site_packages_MiB": round(size_mib, 1), "collect_rss_MiB": round(rss_kib / 1024, 1)}
    (ROOT / "artifacts").mkdir(exist_ok=True)
    (ROOT / "artifacts" / "collector-only-install.json").write_text(json.dumps(figures, indent=2) + "\n")
    print(f"collector-only install: {figures}", file=sys.stderr)
    assert rss_kib > 0


@pytest.mark.parametrize("max_drop", [3.0, 10.0, 5.0])
def test_drawdown_wire_is_the_same_answer_as_the_wire_command(max_drop, capsys):
    from drawdown.cli import main

    assert main(["wire", "--current", "60", "--length", "4", "--voltage", "12", "--max-drop", f"{max_drop:g}",
                 "--json"]) == 0
    cli = json.loads(capsys.readouterr().out)
    api = json.loads(json.dumps(drawdown.wire(current_A=60, length_m=4, voltage_V=12, max_drop_pct=max_drop).to_json()))
    assert api == cli
