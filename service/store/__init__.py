"""Match history and baselines: SQLite in the data folder (stdlib sqlite3).

``record``   a stored match: figures per player and scope (match, period, 15-minute block, peak window)
``history``  the database: versioned migrations, save, list, baselines

Every stored match says where its figures came from: ``live`` (the service at
full time), ``replay`` (a recording of live data run through the same engine)
or ``offline`` (post-match data). Baselines use live and replay only, so live
figures are compared with live figures, never with post-match ones.
"""
