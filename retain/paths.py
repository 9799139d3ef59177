"""Where the project's non-Python files live (sql/, site_templates/, demo_data/).

``sql/`` holds the preparation steps; ``sql/models/`` the models' SQL (the resource
package ``retain._sql.models``).

The top-level folders of the repository are the source of truth. pyproject.toml
maps each onto a resource package inside retain (``retain._sql``,
``retain._site_templates``, ``retain._demo_data``), so both a normal wheel and an
editable install (``pip install -e .``) find them with :mod:`importlib.resources`.
Run from a checkout that is not installed (say ``PYTHONPATH=.``), the folders
beside ``retain/`` are used.
"""

from __future__ import annotations

from importlib.resources import files
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def _folder(package: str, checkout_name: str) -> Path:
    """The folder of resource package ``package`` (else ``checkout_name`` beside retain/)."""
    try:
        return Path(str(files(package)))
    except ModuleNotFoundError:
        return ROOT / checkout_name


SQL_DIR = _folder("retain._sql", "sql")
TEMPLATES_DIR = _folder("retain._site_templates", "site_templates")
DEMO_DIR = _folder("retain._demo_data", "demo_data")
