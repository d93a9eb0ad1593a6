#!/usr/bin/env bash
# Installs planview with its live-review drivers and reviews every bundled plan (no database server needed), then opens
# the walkthrough notebook in JupyterLab. With --no-lab (or without a terminal) it stops
# after writing the reviews: one HTML page and one Markdown ticket body per plan.
set -euo pipefail
cd "$(dirname "$0")/.."
. tests/python-env.sh
"$PY" -m pip install -q --disable-pip-version-check -e '.[live]'  # live: psycopg 3 and DuckDB
"$PY" -m planview.cli demo --out planview-demo
if [ "${1:-}" != "--no-lab" ] && [ -t 1 ]; then
  as_root=(); [ "$(id -u)" = 0 ] && as_root=(--allow-root)  # JupyterLab refuses root without it
  exec "$PY" -m jupyterlab "${as_root[@]}" example_notebooks/review_walkthrough.ipynb
fi
