"""The planner pages' views: thin. Reads go through the selectors of ``inventory`` and
``analysis``, answers computed now through ``analysis.actions`` (the same functions as the API
and the command line), writes through the services of ``inventory``."""
