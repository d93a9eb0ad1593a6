# Sourced by the README's two set-up commands: sets PY to the Python that planview is installed
# into and run with.
# - An active virtual environment (VIRTUAL_ENV) is used as it is.
# - A Python that lets pip install (pyenv, conda, a CI image) is used as it is.
# - An externally managed system Python (PEP 668: stock Debian and Ubuntu, whose pip refuses with
#   "externally-managed-environment") gets a virtual environment in .venv, made once, which sees
#   the system's packages (--system-site-packages) and installs the rest itself.
PY=python3
if [ -z "${VIRTUAL_ENV:-}" ] && python3 - <<'PYEOF'
import os, sys, sysconfig
marker = os.path.join(sysconfig.get_path("stdlib"), "EXTERNALLY-MANAGED")
sys.exit(0 if os.path.exists(marker) and sys.prefix == sys.base_prefix else 1)
PYEOF
then
  if [ ! -x .venv/bin/python ]; then
    if ! python3 -c "import ensurepip" 2>/dev/null; then  # Debian splits venv's pip into python3-venv
      if [ "$(id -u)" = 0 ]; then SUDO=""; else SUDO="sudo"; fi
      $SUDO apt-get update -q && $SUDO apt-get install -y -q --no-install-recommends python3-venv
    fi
    python3 -m venv --system-site-packages .venv
  fi
  PY="$PWD/.venv/bin/python"
  echo "planview: $(python3 --version) is externally managed (PEP 668); using the virtual environment .venv"
fi
