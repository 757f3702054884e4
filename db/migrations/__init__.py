"""One module per schema version: ``NNNN_name.py`` with ``VERSION`` and ``upgrade(connection)``.

Rules for a migration module:

- ``VERSION`` is the schema version the store has after ``upgrade`` ran; versions
  start at 1 and have no gaps.
- ``upgrade(connection)`` receives a SQLAlchemy ``Connection`` inside the caller's
  transaction.  It must not commit, and it must use SQLAlchemy core DDL or
  portable SQL only (no SQLite-only statements), so a server database works too.
- Never edit a migration that has been released; add a new one.

``picker.store.migrate`` discovers the modules, runs the pending ones in order in
one transaction and records the new version in the ``schema_version`` table.
"""
