"""Where the project's non-Python files live (sql/, site_templates/, demo_data/).

They sit beside the package at the repository's top level (see DESIGN.md); the
project is installed in editable mode (``pip install -e .``) so they are found
next to ``retain/``.
"""

from __future__ import annotations

from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
SQL_DIR = ROOT / "sql"
TEMPLATES_DIR = ROOT / "site_templates"
DEMO_DIR = ROOT / "demo_data"
