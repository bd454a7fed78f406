"""The local planning page of ``routerisk serve``: a JSON API and a page, on Starlette.

:mod:`routerisk.serve.app` builds the ASGI application (routes, middleware) on a loaded
network; :mod:`routerisk.serve.service` holds the loaded network and the work of every endpoint,
which calls the library functions the commands call (scoring, alternatives, review, day plan), so
a figure on the page is the figure the command prints; :mod:`routerisk.serve.requests` reads and
checks the JSON bodies and the files sent. ``routerisk/static/serve/`` holds the
page (HTML, CSS, JavaScript); Leaflet is served from the package's bundled copy (with its
licence, ``/static/leaflet/LICENSE``), so nothing is fetched from outside.
"""
