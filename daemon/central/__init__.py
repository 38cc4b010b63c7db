"""Many rigs, one PostgreSQL database: store-and-forward from each rig's SQLite file.

- ``errors``: what can go wrong, each saying what to do, with the exit code a command gives for it.
- ``connect``: a connection by libpq's own rules (URL or key=value, service file, PG* environment, passfile, TLS).
- ``schema``: the central schema as numbered migrations, its roles and row-level security.
- ``local``: reading a rig's SQLite store for a push (never writes it, except to migrate an old file).
- ``push``: the push itself: what the server lacks, run by run, each in one transaction.
- ``read``: the read side for ``history``, ``report --site`` and ``profile`` across rigs.
- ``scheduler``: linerigd's background sync, a child process with back-off, its status for ``linerig status``.
"""
