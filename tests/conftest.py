"""PostgreSQL fixtures and the ``pg`` marker (see tests/pgharness.py).

Only PostgreSQL things belong here; other fixtures live in their own plugins.
"""

import os
import sys

# One module name, ``pgharness``, whatever pytest's import mode or whether
# tests/ is a package.
_HERE = os.path.dirname(os.path.abspath(__file__))
if _HERE not in sys.path:
    sys.path.insert(0, _HERE)

from pgharness import pg_servers, scenario_db  # noqa: E402,F401


def pytest_configure(config):
    config.addinivalue_line(
        "markers",
        "pg: needs a real throw-away PostgreSQL server (fixtures pg_servers / scenario_db)",
    )
