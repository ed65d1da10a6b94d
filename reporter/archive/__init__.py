"""The archive of signed packs: sign-off, the hash-chained ledger, verify and repair.

Layout of an archive folder::

    ledger.sqlite                         the entries (see ledger.py)
    <period_end>/<name>.pdf               the signed, tagged PDF/A-3a, read-only
    <period_end>/<name>/pack.html         the build's HTML, read-only
    <period_end>/<name>/results/...       the build's results files, read-only
    quarantine/<stamp>/...                files 'repair' found with no entry (kept)

``<name>`` is ``<pack name>-<period_end>``, with ``-r2``, ``-r3`` ... for packs that
supersede an earlier sign-off of the same period.
"""
