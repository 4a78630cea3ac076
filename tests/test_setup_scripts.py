"""The set-up of `make demo` and `make test` on a fresh machine
(tools/debian-packages.sh): missing Debian packages are installed as root
or with password-less sudo, each command printed first; otherwise it stops
at once with the exact install command. The system's package tools are
replaced by stand-ins on PATH that record their calls (nothing is installed).
"""
from __future__ import annotations

import os
import shutil
import subprocess
from pathlib import Path

import pytest

SCRIPT = Path(__file__).resolve().parent.parent / "tools" / "debian-packages.sh"


def _tools(tmp_path: Path, uid: int, installed: set[str], sudo_ok: bool | None) -> dict[str, str]:
    """Stand-ins for id, dpkg-query, apt-get and sudo; calls go to calls.log."""
    b = tmp_path / "bin"
    b.mkdir()
    log = tmp_path / "calls.log"
    scripts = {
        "id": f'#!/bin/bash\n[ "$1" = "-u" ] && echo {uid} && exit 0\nexec /usr/bin/id "$@"\n',
        "dpkg-query": "#!/bin/bash\ncase \" " + " ".join(sorted(installed)) + " \" in *\" ${@: -1} \"*) "
                      "echo -n 'install ok installed'; exit 0;; esac\nexit 1\n",
        "apt-get": f'#!/bin/bash\necho "apt-get $*" >> "{log}"\n',
    }
    if sudo_ok is not None:
        scripts["sudo"] = (f'#!/bin/bash\nif [ "$*" = "-n true" ]; then exit {0 if sudo_ok else 1}; fi\n'
                           f'echo "sudo $*" >> "{log}"\nshift; exec "$@"\n')
    for name, text in scripts.items():
        (b / name).write_text(text)
        (b / name).chmod(0o755)
    for tool in ("bash", "grep", "env", "cat"):
        if not (b / tool).exists():
            (b / tool).symlink_to(shutil.which(tool))
    return dict(os.environ, PATH=str(b))


def _run(env, mode):
    return subprocess.run([shutil.which("bash"), str(SCRIPT), mode], env=env, capture_output=True, text=True)


def test_nothing_missing_does_nothing(tmp_path):
    env = _tools(tmp_path, 1000, {"openfoam"}, sudo_ok=False)
    r = _run(env, "demo")
    assert r.returncode == 0 and r.stderr == "" and not (tmp_path / "calls.log").exists()


def test_root_installs_and_prints_each_command(tmp_path):
    env = _tools(tmp_path, 0, {"openfoam", "libegl1"}, sudo_ok=None)
    r = _run(env, "test")
    assert r.returncode == 0, r.stderr
    want = "libegl-mesa0 slurm-wlm munge chromium"
    assert f"+ env DEBIAN_FRONTEND=noninteractive apt-get install -y -qq --no-install-recommends {want}" in r.stderr
    assert "+ apt-get update -qq" in r.stderr
    calls = (tmp_path / "calls.log").read_text().splitlines()
    assert calls == ["apt-get update -qq", f"apt-get install -y -qq --no-install-recommends {want}"]


def test_passwordless_sudo_installs(tmp_path):
    env = _tools(tmp_path, 1000, set(), sudo_ok=True)
    r = _run(env, "demo")
    assert r.returncode == 0, r.stderr
    assert "+ sudo -n env DEBIAN_FRONTEND=noninteractive apt-get install" in r.stderr
    assert "apt-get install -y -qq --no-install-recommends openfoam" in (tmp_path / "calls.log").read_text()


@pytest.mark.parametrize("sudo_ok", [False, None])
def test_no_rights_stops_with_the_exact_command(tmp_path, sudo_ok):
    env = _tools(tmp_path, 1000, set(), sudo_ok=sudo_ok)
    r = _run(env, "demo")
    assert r.returncode == 2
    assert "sudo apt-get update && sudo apt-get install -y --no-install-recommends openfoam" in r.stderr
    assert not (tmp_path / "calls.log").exists()  # nothing tried


def test_bad_mode(tmp_path):
    r = _run(dict(os.environ), "everything")
    assert r.returncode == 2 and "expected demo or test" in r.stderr
