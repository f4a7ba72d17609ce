#!/usr/bin/env bash
# Release checks (run by .ci/run): build the wheel and sdist, `twine check` them, install the
# wheel into a clean virtual environment (no system packages, no source tree on the path) and
# smoke-test the installed console script: --version, demo, cite.
set -euo pipefail  # (greps read all their input: no SIGPIPE under pipefail)
cd "$(dirname "$0")/.."
root=$(pwd)
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
python -m pip install -q build twine
python -m build --outdir "$work/dist" "$root" >"$work/build.log" 2>&1 || { cat "$work/build.log"; exit 1; }
python -m twine check --strict "$work/dist"/*
version=$(python -c "import ast,sys; t=ast.parse(open('src/eddyhop/__init__.py').read()); \
print(next(n.value.value for n in t.body if isinstance(n, ast.Assign) and n.targets[0].id == '__version__'))")
ls "$work/dist/eddyhop-$version-py3-none-any.whl" "$work/dist/eddyhop-$version.tar.gz" >/dev/null
tar tzf "$work/dist/eddyhop-$version.tar.gz" | grep "eddyhop-$version/CITATION.cff" >/dev/null
python -m venv "$work/venv"
"$work/venv/bin/python" -m pip install -q "$work/dist/eddyhop-$version-py3-none-any.whl"
cd "$work"  # away from the source tree
unset PYTHONPATH
export EDDYHOP_CACHE_DIR="$work/cache" MPLBACKEND=Agg
"$work/venv/bin/python" -c "import eddyhop; assert '/venv/' in eddyhop.__file__, eddyhop.__file__"
"$work/venv/bin/eddyhop" --version | grep "$version" >/dev/null
"$work/venv/bin/eddyhop" demo --out demo.nc --no-progress >demo.log 2>&1 || { cat demo.log; exit 1; }
"$work/venv/bin/eddyhop" cite demo.nc --format text | grep "Version $version" >/dev/null
echo "release check: wheel and sdist of eddyhop $version built, twine check passed, demo ran from a clean venv"
