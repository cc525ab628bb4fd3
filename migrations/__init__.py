"""Alembic environment and revisions of the gapwatch history store (shipped with the package)."""
