"""A local web page to review a run before release (``compquant review``); see ``docs/review-page.md``.

:mod:`~compquant.web.app` (the Flask application and its routes), :mod:`~compquant.web.data`
(read-only queries of the record, files found by id and SHA-256), ``templates/`` (the autoescaped HTML
templates) and ``static/style.css``.  Needs the optional extra ``web`` (Flask).
"""
