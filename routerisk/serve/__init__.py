"""The local planning page of ``routerisk serve``: a JSON API and a page, on Starlette.

:mod:`routerisk.serve.app` builds the ASGI application on a loaded network; every endpoint
calls the library functions the commands call (scoring, alternatives, review, day plan), so a
figure on the page is the figure the command prints. ``routerisk/static/serve/`` holds the
page (HTML, CSS, JavaScript); Leaflet is served from the package's bundled copy (with its
licence, ``/static/leaflet/LICENSE``), so nothing is fetched from outside.
"""
