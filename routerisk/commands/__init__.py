"""Sub-commands of the ``routerisk`` command line, one module each."""
