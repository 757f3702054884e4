"""Schema migrations of the picker parts store.

This top-level package ships with picker (see ``[tool.setuptools.packages.find]``
in pyproject.toml), so the migration scripts are importable both from a source
checkout and after a non-editable ``pip install .``.  ``OWNER`` lets
``picker.store.migrate`` check that ``import db`` found this package and not an
unrelated package of the same name.
"""

OWNER = "picker"
