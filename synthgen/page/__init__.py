"""One self-contained HTML page per scored run: ``synthgen report``.

:func:`write_report` reads a run (:mod:`synthgen.page.load`), scores it with
:mod:`synthgen.evaluate`, measures its errors (:mod:`synthgen.page.errors`), and
writes the page (:mod:`synthgen.page.build`) with its figures
(:mod:`synthgen.report.charts`) and failure crops (:mod:`synthgen.page.crops`).
"""

from __future__ import annotations

from collections.abc import Sequence

__all__ = ["write_report"]


def write_report(run, out, predictions=None, *, by: Sequence[str] | None = None, crops: int = 10) -> dict:
    """Read and score a run, and write its HTML page.

    Parameters
    ----------
    run : path-like
        A probe output directory, a dataset, or a sweep directory.
    out : path-like
        The HTML file to write.
    predictions : path-like, optional
        The dataset's COCO results file, or the sweep's predictions directory.
    by : sequence of str, optional
        Facts to slice by (``FACT`` or ``FACT:E0,E1,...``).
    crops : int
        Worst misses and worst false positives shown per subset, each.

    Returns
    -------
    dict
        ``bytes`` (page size), ``subsets``, ``title``.
    """
    from synthgen.errors import require_extra
    from synthgen.page.build import write_page
    from synthgen.page.load import load_run

    require_extra("matplotlib", "plots", "the report page")
    loaded = load_run(run, predictions, by=by)
    size = write_page(loaded, out, crops=crops)
    return {"bytes": size, "subsets": len(loaded.subsets), "title": loaded.title}
