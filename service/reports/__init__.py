"""Half-time and full-time reports, and the player alert rules beside them.

``builder``  writes a report folder (report.html, report.csv, snapshot.json)
``charts``   the matplotlib (SVG backend) charts of a report
``page``     the self-contained HTML page
``summary``  its first page: the match at a glance (one screen, one A4 page)
``table``    the flat one-row-per-player table of every snapshot leaf
``export``   export.csv and the report's CSV (the report's figures under the export's names)
``alerts``   drop-off and load-budget rules evaluated (their data models: :mod:`pacewire.wire.rules`)
``offline``  ``pacewire report FOLDER --out DIR``

Importing this package loads nothing heavy: matplotlib is imported by
``charts`` only when a report is drawn.
"""
