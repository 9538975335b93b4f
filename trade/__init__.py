"""The trade's vocabulary: accuracy classes (IEEE C57.13, IEC 61869-2), the conductor table of
CT secondary wiring, and ratio strings.

A leaf package: plain Python, imports nothing of Loopkeep's (no Django, no ``inventory``, no
``analysis``), so the record, its validators and the engine all read these strings the same way.
The import-linter contracts in ``pyproject.toml`` hold it.
"""
