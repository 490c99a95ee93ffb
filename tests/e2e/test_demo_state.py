"""The demo keeps its state in a temporary directory unless given one, and leaves
nothing behind in the working directory or the temporary folder."""

from __future__ import annotations

import os
import subprocess
import sys


def test_demo_writes_nothing_to_the_working_directory(tmp_path):
    work, home, tmp = tmp_path / "work", tmp_path / "home", tmp_path / "tmp"
    work.mkdir()
    tmp.mkdir()
    env = {k: v for k, v in os.environ.items()
           if k not in ("STATE_DIRECTORY", "XDG_STATE_HOME")}
    env.update(HOME=str(home), TMPDIR=str(tmp))
    res = subprocess.run(
        [sys.executable, "-m", "lightwarden.exporters.app.cli", "demo", "--duration", "4",
         "--port", "0", "--interval", "1", "--backfill-days", "0"],
        capture_output=True, text=True, timeout=120, cwd=work, env=env)
    assert res.returncode == 0, res.stderr
    assert "starting the Quillmoor lab" in res.stdout  # it says what it is doing
    assert "metrics:" in res.stdout
    assert list(work.iterdir()) == []
    assert not home.exists()
    leftover = [p.name for p in tmp.iterdir() if p.name.startswith("lightwarden-demo-")]
    assert leftover == []
