"""Importing any routerisk module changes nothing of the user's session.

In a fresh interpreter the third-party modules the package imports are loaded first (their
own import effects are theirs), then every module of the package (walked with pkgutil), and
the state a notebook user relies on is compared before and after: matplotlib's backend and
settings, warning filters, logging handlers and levels, osmnx's settings, numpy's error
handling and print options, pandas' options, environment variables, the working directory
and ``sys.path``.
"""

from __future__ import annotations

import json
import subprocess
import sys
import textwrap

SCRIPT = textwrap.dedent(
    """
    import importlib, json, logging, os, pkgutil, sys, warnings
    import matplotlib, numpy as np, osmnx as ox, pandas as pd

    def state():
        root = logging.getLogger()
        return {
            "backend": matplotlib.get_backend(),
            "rc": sorted((k, repr(v)) for k, v in matplotlib.rcParams.items()),
            "warnings": [repr(f) for f in warnings.filters],
            "root_handlers": [repr(h) for h in root.handlers],
            "root_level": root.level,
            "loggers_with_handlers": sorted(
                n for n, lg in logging.Logger.manager.loggerDict.items()
                if isinstance(lg, logging.Logger) and lg.handlers
            ),
            "ox": sorted(
                (k, repr(getattr(ox.settings, k))) for k in dir(ox.settings)
                if not k.startswith("_") and not callable(getattr(ox.settings, k))
                and not isinstance(getattr(ox.settings, k), type(ox))
            ),
            "np_err": np.geterr(),
            "np_print": repr(np.get_printoptions()),
            "pd_opts": repr(pd.options.display.max_rows) + repr(pd.options.mode.copy_on_write),
            "env": sorted(os.environ.items()),
            "cwd": os.getcwd(),
            "path": list(sys.path),
        }

    import ast, pathlib
    import routerisk
    # the third-party modules routerisk imports are loaded first: what they do on import
    # (scipy's warning filters, urllib3's, library NullHandlers) is theirs, not routerisk's
    deps = set()
    for f in pathlib.Path(routerisk.__file__).parent.rglob("*.py"):
        for node in ast.walk(ast.parse(f.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Import):
                deps.update(a.name for a in node.names)
            elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
                deps.add(node.module)
                deps.update(f"{node.module}.{a.name}" for a in node.names)
    for name in sorted(d for d in deps if not d.startswith("routerisk")):
        try:
            importlib.import_module(name)
        except ImportError:
            pass  # a name, not a module (or an optional extra)
    before = state()
    names = [m.name for m in pkgutil.walk_packages(routerisk.__path__, "routerisk.")]
    for name in names:
        if name.endswith("__main__"):
            continue
        importlib.import_module(name)
    after = state()
    changed = sorted(k for k in before if before[k] != after[k])
    print(json.dumps({"modules": len(names), "changed": changed}))
    """
)


def test_importing_every_module_leaves_the_session_as_it_was():
    r = subprocess.run(
        [sys.executable, "-c", SCRIPT], capture_output=True, text=True, timeout=300, check=False
    )
    assert r.returncode == 0, r.stderr[-2000:]
    got = json.loads(r.stdout.strip().splitlines()[-1])
    assert got["modules"] > 40  # the walk saw the sub-packages
    assert got["changed"] == [], f"import changed the session: {got['changed']}"
