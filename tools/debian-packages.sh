#!/usr/bin/env bash
# The Debian packages `make demo` and `make test` need, installed when missing.
#
# usage: tools/debian-packages.sh demo|test
#   demo   the solver (openfoam)
#   test   the solver; EGL for off-screen rendering; SLURM and munge for the
#          cluster tests; a headless browser for the report tests
#
# As root, or with password-less sudo, the missing packages are installed
# (each command printed before it runs). Otherwise it stops at once (exit
# code 2) with the exact command to run.
set -euo pipefail

case "${1:-}" in
    demo) want=(openfoam) ;;
    test) want=(openfoam libegl1 libegl-mesa0 slurm-wlm munge chromium) ;;
    *) echo "debian-packages.sh: expected demo or test, got '${1:-}'" >&2; exit 2 ;;
esac

missing=()
for p in "${want[@]}"; do
    if ! dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed"; then
        missing+=("$p")
    fi
done
[ ${#missing[@]} -eq 0 ] && exit 0

cmd="apt-get install -y --no-install-recommends ${missing[*]}"
if ! command -v apt-get >/dev/null 2>&1; then
    echo "make $1: needs the Debian packages ${missing[*]} (or their equivalents) and this system has no apt-get;" \
         "install them with your package manager" >&2
    exit 2
fi
if [ "$(id -u)" = "0" ]; then
    sudo=()
elif command -v sudo >/dev/null 2>&1 && sudo -n true 2>/dev/null; then
    sudo=(sudo -n)
else
    echo "make $1: missing Debian packages: ${missing[*]}. Install them, then run make $1 again:" >&2
    echo "    sudo apt-get update && sudo $cmd" >&2
    exit 2
fi
run() { echo "+ $*" >&2; "$@"; }
run "${sudo[@]}" apt-get update -qq
run "${sudo[@]}" env DEBIAN_FRONTEND=noninteractive apt-get install -y -qq --no-install-recommends "${missing[@]}"
