"""Not Python: this folder ships inside the installed package as retain._site_templates.

See retain/paths.py and pyproject.toml ([tool.setuptools.package-dir]).
"""
