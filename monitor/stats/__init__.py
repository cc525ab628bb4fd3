"""Pure statistics: numpy and scipy only — no SQL, no clock, no I/O.

Every other layer of gapwatch stands on these modules; none of them imports
anything above this package (checked by the import contracts in ``pyproject.toml``).
"""
