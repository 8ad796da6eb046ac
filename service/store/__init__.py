"""Match history and baselines: SQLite in the data folder (stdlib sqlite3).

``record``   a stored match: figures per player and scope (match, period, 15-minute block, peak window)
``history``  the database: versioned migrations, save, list, baselines

Every stored match says where its figures came from: ``live`` (the service at
full time), ``replay`` (a recording of live data run through the same engine)
or ``import`` (the provider's post-processed data, stored only when asked:
``pacewire history import --allow-post-processed``). Baselines use live and
replay only, so live figures are compared with live figures, never with
post-processed ones, which run a few percent higher.
"""
