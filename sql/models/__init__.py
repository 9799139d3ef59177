"""Not Python: the models' SQL, shipped inside the installed package as retain._sql.models.

See retain/paths.py and pyproject.toml ([tool.setuptools.package-dir]).
"""
