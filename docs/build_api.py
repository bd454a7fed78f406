"""Build the API reference of routerisk from its docstrings with pdoc (offline, HTML).

Usage: ``python docs/build_api.py OUT_DIR``; open ``OUT_DIR/index.html``. A test builds it
into a temporary folder, so a broken docstring or import fails the suite.
"""

from __future__ import annotations

import sys
from pathlib import Path

#: The package documented; pdoc follows its __all__ (the functions and light modules).
MODULES = ("routerisk",)  # with the modules its __all__ names: api, results, errors, datasets


def build(out: Path) -> list[Path]:
    """Write the HTML reference of :data:`MODULES` into ``out``; return the pages written."""
    import pdoc
    import pdoc.render

    pdoc.render.configure(
        docformat="numpy", footer_text="routerisk API reference", search=False, show_source=False
    )
    out.mkdir(parents=True, exist_ok=True)
    pdoc.pdoc(*MODULES, output_directory=out)
    return sorted(out.rglob("*.html"))


if __name__ == "__main__":
    if len(sys.argv) != 2:
        sys.exit("usage: python docs/build_api.py OUT_DIR")
    pages = build(Path(sys.argv[1]))
    print(f"wrote {len(pages)} pages to {sys.argv[1]}")
