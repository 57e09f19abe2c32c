"""``sevenfold view``: a live web page of the queue, a thin shell over :mod:`sevenfold.queue`.

* :mod:`.data`  read-only access: the database (``mode=ro``), residual logs followed by
  offset, finished results' summaries and figures (drawn by :mod:`sevenfold.report`)
* :mod:`.app`   the Starlette routes: pages, JSON, figures, cancel and retry behind a token
* :mod:`.serve` the command: binds 127.0.0.1 by default, prints the link, runs uvicorn

``static/`` holds the page's only script and style (no network needed); ``templates/`` the
page shell. The queue and the numerical core never import this package.
"""
