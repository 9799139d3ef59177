"""Not Python: this folder ships inside the installed package as retain._sql.

See retain/paths.py and pyproject.toml ([tool.setuptools.package-dir]).
"""
