"""``reporter preview``: a local server that shows the pack's HTML while its files are edited.

:mod:`reporter.preview.staged` rebuilds only the stages a change touches;
:mod:`reporter.preview.server` serves the page on 127.0.0.1 and watches the pack folder.
"""
