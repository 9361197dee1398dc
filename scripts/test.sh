#!/usr/bin/env bash
# The project's one test command: the README and .ci/run both call this script,
# so what a user runs and what CI runs cannot drift apart.
#
# pytest runs from an empty folder outside the source tree, with the repository's
# settings (-c pyproject.toml, --rootdir), so `import inclination` finds the installed
# package, never the source folder by accident: with an editable install
# (pip install -e '.[test]') that is the source; after `pip install .` it is the wheel,
# and a file missing from the wheel fails the tests. Doctests are collected from the
# installed package (--pyargs inclination).
#
# Arguments go to pytest; a path relative to the repository (tests/test_grains.py)
# is made absolute, and when one is given only the paths given are collected.
set -euo pipefail
root="$(cd "$(dirname "$0")/.." && pwd)"
export MPLBACKEND=Agg
args=()
paths=0
for arg in "$@"; do
    if [[ "$arg" != -* && -e "$root/${arg%%::*}" ]]; then
        args+=("$root/$arg")
        paths=1
    else
        args+=("$arg")
    fi
done
if [ "$paths" -eq 0 ]; then
    args+=("$root/tests" --pyargs inclination)
fi
work="$(mktemp -d)"
trap 'rm -rf "$work"' EXIT
cd "$work"
if ! python -c "import inclination" 2>/dev/null; then
    echo "scripts/test.sh: inclination is not installed here; run: pip install -e '.[test]'" >&2
    exit 2
fi
python -m pytest -c "$root/pyproject.toml" --rootdir "$root" "${args[@]}"
