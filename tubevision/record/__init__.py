"""Stage 7, record: the evidence a notebook entry keeps.

* ``build``    — the versioned record dict (``tubevision.record/1``) and its schema check.
* ``annotate`` — the annotated image, a pure function of the photo and the record.
* ``write``    — atomic writes of an output folder; nothing is silently overwritten.
"""

from .build import RECORD_SCHEMA_ID, build_record, record_schema, validate_record

__all__ = ["RECORD_SCHEMA_ID", "build_record", "record_schema", "validate_record"]
