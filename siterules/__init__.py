"""Rules of the site record that both the importer (``inventory``) and the engine
(``analysis.engine``) apply, written once. Pure Python: imports nothing of the project."""
