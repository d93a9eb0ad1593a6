#!/usr/bin/env bash
# Installs everything the test suite needs on a fresh Debian machine, then runs the whole suite.
# The tests start (and stop) their own throw-away PostgreSQL and MariaDB servers on Unix
# sockets, and JupyterLab on 127.0.0.1; nothing needs to be running beforehand.
set -euo pipefail
cd "$(dirname "$0")/.."

need_apt=()
[ -x /usr/lib/postgresql/15/bin/postgres ] || ls /usr/lib/postgresql/*/bin/postgres >/dev/null 2>&1 || need_apt+=(postgresql)
command -v mariadbd >/dev/null 2>&1 || need_apt+=(mariadb-server)
[ -x /usr/bin/chromium ] || need_apt+=(chromium)
if [ ${#need_apt[@]} -gt 0 ]; then
  if [ "$(id -u)" = 0 ]; then SUDO=""; else SUDO="sudo"; fi
  export DEBIAN_FRONTEND=noninteractive
  $SUDO apt-get update -q
  $SUDO apt-get install -y -q --no-install-recommends "${need_apt[@]}" fonts-dejavu-core
  # the packages' own services are not wanted: the tests start private servers
  $SUDO systemctl disable --now postgresql mariadb >/dev/null 2>&1 || true
fi

. tests/python-env.sh
"$PY" -m pip install -q --disable-pip-version-check -e ".[test]"

status=0
"$PY" -m pytest -q -p no:cacheprovider "$@" || status=$?
if [ "$status" = 5 ]; then
  echo "no tests ran"; exit 1
fi
exit "$status"
