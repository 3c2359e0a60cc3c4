"""Reports of injection campaigns: figures (PNG and PDF) and a self-contained HTML page.

:func:`make_report` is what ``ringsearch campaign report DIR`` calls.
"""

from __future__ import annotations

import time
from pathlib import Path

from ringsearch.errors import InputError


def make_report(out: str | Path) -> Path:
    """Draw the figures of a finished campaign and write ``out/report.html``.

    The tables are assembled first if every chunk has finished but the
    tables are missing (e.g. the run was interrupted during assembly).

    Parameters
    ----------
    out : path
        Campaign output folder.

    Returns
    -------
    Path of ``report.html``.

    Raises
    ------
    InputError
        If ``out`` is not a campaign folder or the campaign is unfinished.

    Examples
    --------
    >>> make_report("out/quick")  # doctest: +SKIP
    PosixPath('out/quick/report.html')
    """
    from ringsearch.campaign.execute import campaign_status
    from ringsearch.campaign.results import assemble
    from ringsearch.report.html import write_report
    from ringsearch.report.plots import make_figures

    start = time.perf_counter()
    out = Path(out)
    status = campaign_status(out)
    if not status["complete"]:
        raise InputError(f"campaign in {out} is unfinished ({status['chunks_done']} of "
                         f"{status['n_chunks']} chunks); run 'ringsearch campaign run' "
                         f"again to finish it.")
    if not status["assembled"] or not (out / "summary.json").exists():
        assemble(out)
    figures = make_figures(out)
    return write_report(out, figures, runtime_s=time.perf_counter() - start)


__all__ = ["make_report"]
