"""Readings from the machine: runs imported from files (issue 14 part 2).

``files`` reads our exchange format and a machine's export (pure parsing);
``mappings`` keeps each machine's column mapping; ``imports`` plans and imports a file
through the jobs use-case; ``folder`` is the watched folder's file handling.
"""
