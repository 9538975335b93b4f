"""The typed record of a site: frozen dataclasses between the site file or the database and
everything that reads a site (the circuit engine, the ratings, the export).

No Django and nothing else of ours: ``inventory`` and ``analysis`` import it, it imports neither.

- ``record.model``: the dataclasses (``SiteRecord`` and its parts);
- ``record.operations``: the procedure operations, the one vocabulary of them;
- ``record.document``: ``record_from_document`` / ``record_to_document`` (``loopkeep.site/1``).
"""

from record.document import (
    RecordError,
    as_record,
    canonical,
    record_from_document,
    record_to_document,
)
from record.model import (
    CT,
    Bus,
    Contact,
    Device,
    DeviceInput,
    DeviceOutput,
    Equipment,
    Link,
    Procedure,
    Site,
    SiteRecord,
    Switch,
    TapChange,
    TerminalBlock,
    Wire,
)
from record.operations import (
    OPERATION_KEYS,
    OPERATION_TYPES,
    AddJumper,
    Deenergize,
    Energize,
    InsertDevice,
    Land,
    Lift,
    Note,
    Operation,
    OperationError,
    RemoveDevice,
    RemoveJumper,
    SetSwitch,
    operation_from_json,
    operation_to_json,
)

__all__ = [
    "CT",
    "OPERATION_KEYS",
    "OPERATION_TYPES",
    "AddJumper",
    "Bus",
    "Contact",
    "Deenergize",
    "Device",
    "DeviceInput",
    "DeviceOutput",
    "Energize",
    "Equipment",
    "InsertDevice",
    "Land",
    "Lift",
    "Link",
    "Note",
    "Operation",
    "OperationError",
    "Procedure",
    "RecordError",
    "RemoveDevice",
    "RemoveJumper",
    "SetSwitch",
    "Site",
    "SiteRecord",
    "Switch",
    "TapChange",
    "TerminalBlock",
    "Wire",
    "as_record",
    "canonical",
    "operation_from_json",
    "operation_to_json",
    "record_from_document",
    "record_to_document",
]
