"""A shop's history from spreadsheets (issue 14, part 3): customers, rotor types, rotors and
past jobs read from CSV or xlsx, previewed row by row, applied in one transaction.

``files`` reads a file into rows of text; ``kinds`` says what each kind of file holds
(columns, keys, templates); ``service`` holds the use-cases (preview, apply) that hand
every row to the registry's and the jobs' own use-cases; ``routes`` is the import page.
"""
