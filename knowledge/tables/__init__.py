"""The knowledge tables: their strict models, the fact catalogue, the condition compiler and the loader
that validates everything at load into a read-only :class:`~knowledge.tables.loader.Knowledge`."""
