"""The files of ``routerisk review``: ``areas.csv``, ``areas.json`` and ``report.html``."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from routerisk.analysis.review.result import Review, comparison_table
from routerisk.io.atomic import (
    atomic_directory,
    check_target,
    dumps_json,
    write_text_atomic,
)
from routerisk.render import report
from routerisk.render.review_report import review_html


def review_csv(review: Review) -> str:
    """Return the comparison table as CSV text (directed km; see the JSON notes)."""
    return comparison_table(review).to_csv(index=False, lineterminator="\n")


def write_review(
    review: Review,
    *,
    out: str | Path | None = None,
    report_path: str | Path | None = None,
    force: bool = False,
    tiles: Any = None,
    bands: str = "fixed",
) -> list[Path]:
    """Write ``areas.csv``, ``areas.json`` and ``report.html`` to ``out``, and/or a report.

    The folder is assembled under a temporary name and moved into place when complete.
    """
    written: list[Path] = []
    if out is None and report_path is None:
        return written
    if out is not None:
        check_target(out, force=force)
    if report_path is not None:
        check_target(report_path, force=force)
    page = review_html(review, tiles=tiles, bands=bands)
    if out is not None:
        with atomic_directory(out, force=force) as tmp:
            write_text_atomic(tmp / "areas.csv", review_csv(review))
            write_text_atomic(tmp / "areas.json", dumps_json(review.to_json()) + "\n")
            report.write_report(tmp / "report.html", page)
        written += [Path(out) / n for n in ("areas.csv", "areas.json", "report.html")]
    if report_path is not None:
        written.append(report.write_report(report_path, page, force=force))
    return written
