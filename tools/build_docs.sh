#!/usr/bin/env bash
# Build the documentation (Sphinx + MyST, warnings are errors) into docs/_build/html:
# the generated pages must be current, the gallery figures are drawn from the demo study by
# the installed code, and the docstring examples must pass (doctest).
#   bash tools/build_docs.sh          (needs the `docs` extra: pip install -e ".[docs]")
set -euo pipefail
cd "$(dirname "$0")/.."
export MPLBACKEND=Agg
python tools/gen_docs.py --check
gallery=docs/_gallery
rm -rf "$gallery" docs/_build
mkdir -p "$gallery"
python -m eddyhop demo --out "$gallery/demo.nc" --no-progress >/dev/null
python -m eddyhop analyse "$gallery/demo.nc" --out "$gallery/demo.analysed.nc" -q
python -m eddyhop plot "$gallery/demo.analysed.nc" --out "$gallery" --format png >/dev/null
python -m sphinx -W --keep-going -q -b html docs docs/_build/html
python -m pytest -q -p no:cacheprovider tests/test_doctests.py
echo "docs built: docs/_build/html/index.html"
