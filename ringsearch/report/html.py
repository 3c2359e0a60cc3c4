"""A self-contained HTML report of an injection campaign.

Everything the page needs is inside the one file: figures as base64 PNG
``data:`` URIs, the style sheet inline, no scripts and no external links, so
it opens offline and can be mailed or attached to a proposal as it is.
"""

from __future__ import annotations

import base64
import html
import json
import platform
from pathlib import Path

import numpy as np
import pandas as pd

from ringsearch import __version__
from ringsearch.files import json_safe, write_text

_CSS = """
body { font-family: system-ui, -apple-system, "Segoe UI", sans-serif; margin: 2em auto;
       max-width: 1100px; color: #111; line-height: 1.4; padding: 0 1em; }
h1 { border-bottom: 3px solid #0072B2; padding-bottom: .2em; }
h2 { color: #0072B2; margin-top: 1.6em; }
table { border-collapse: collapse; margin: .6em 0; font-size: 90%; }
th, td { border: 1px solid #ccc; padding: .25em .6em; text-align: right; }
th { background: #eef5fb; }
td:first-child, th:first-child { text-align: left; }
pre { background: #f6f6f6; padding: .8em; overflow-x: auto; font-size: 85%; }
figure { margin: 1em 0; }
figcaption { font-size: 90%; color: #444; }
img { max-width: 100%; }
.note { color: #7a4a00; }
dl.meta { display: grid; grid-template-columns: max-content auto; gap: .2em 1em; }
dl.meta dt { font-weight: 600; }
"""

#: Captions of the figures, by name (see :func:`ringsearch.report.plots.make_figures`).
CAPTIONS = {
    "efficiency_snr": "Detection efficiency against the injections' network optimal SNR. "
                      "Panels: template overtone count; colours: injected overtone count; "
                      "error bars: binomial confidence intervals; lines: fitted sigmoids; "
                      "markers of the series in one bin are offset slightly for legibility.",
    "efficiency_distance": "Detection efficiency against luminosity distance (Mpc); as "
                           "above, markers offset slightly within each bin.",
    "found_missed": "Found (circles) and missed (crosses) injections.",
    "recovered": "Recovered against injected parameters for found injections; dashed: equality.",
    "overtone_efficiency": "Overtone recovery against the injections' network optimal SNR: "
                           "the fraction of injections whose data support at least k "
                           "overtones (each added overtone's log10 Bayes factor above the "
                           "campaign's threshold), per injected overtone count; every "
                           "analysed injection, found or not; error bars: binomial "
                           "confidence intervals; markers offset slightly within each bin.",
    "background": "Time-slide background of the ranking statistic and the detection "
                  "threshold (dashed).",
}


def _img(path: Path) -> str:
    data = base64.b64encode(Path(path).read_bytes()).decode("ascii")
    return f'<img alt="{html.escape(Path(path).stem)}" src="data:image/png;base64,{data}">'


def _table(frame: pd.DataFrame, floatfmt: str = "{:.4g}") -> str:
    if frame is None or frame.empty:
        return "<p><em>(empty)</em></p>"

    def fmt(v):
        if isinstance(v, float | np.floating):
            return "" if not np.isfinite(v) else floatfmt.format(v)
        return v

    shown = frame.copy()
    for c in shown.columns:
        shown[c] = shown[c].map(fmt)
    return shown.to_html(index=False, escape=True, border=0)


def _read_csv(path: Path) -> pd.DataFrame:
    try:
        return pd.read_csv(path)
    except (FileNotFoundError, pd.errors.EmptyDataError):
        return pd.DataFrame()


def write_report(out: str | Path, figures: dict[str, Path], runtime_s: float | None = None
                 ) -> Path:
    """Write ``out/report.html`` from the campaign tables and the given PNG figures.

    Parameters
    ----------
    out : path
        A finished campaign folder.
    figures : dict
        Figure name -> PNG path (from :func:`ringsearch.report.plots.make_figures`).
    runtime_s : float, optional
        Wall time of the report itself, shown with the campaign's chunk times.

    Returns
    -------
    Path of the report.

    Examples
    --------
    >>> write_report("out/quick", make_figures("out/quick"))  # doctest: +SKIP
    PosixPath('out/quick/report.html')
    """
    out = Path(out)
    summary = json.loads((out / "summary.json").read_text())
    manifest = json.loads((out / "campaign.json").read_text())
    toml_text = (out / "campaign.toml").read_text() if (out / "campaign.toml").exists() else ""
    if not toml_text.strip():
        toml_text = json.dumps(json_safe(manifest.get("config", {})), indent=2, allow_nan=False)
    sigmoid = _read_csv(out / "sigmoid.csv")
    sensitivity = _read_csv(out / "sensitivity.csv")
    thresholds = _read_csv(out / "threshold.csv")
    accuracy = _read_csv(out / "accuracy.csv")
    efficiency = _read_csv(out / "efficiency.csv")
    overtones = _read_csv(out / "overtone_efficiency.csv")

    e = html.escape
    name = summary.get("name", "campaign")
    parts = [
        "<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
        f"<title>ringsearch campaign report: {e(name)}</title>",
        f"<style>{_CSS}</style></head><body>",
        f"<h1>Injection campaign: {e(name)}</h1>",
        '<dl class="meta">',
    ]
    meta = [
        ("software", f"ringsearch {__version__} (Python {platform.python_version()})"),
        ("configuration hash", summary.get("config_hash", "")),
        ("created", summary.get("created_utc", "")),
        ("assembled", summary.get("assembled_utc", "")),
        ("injections", str(summary.get("n_injections", ""))),
        ("chunks", str(summary.get("n_chunks", ""))),
        ("injections outside filtered time (left out)", str(summary.get("n_unsearched", 0))),
        ("chunk CPU time", f"{summary.get('chunk_cpu_s', 0.0):.1f} s"),
        ("chunk wall time (sum)", f"{summary.get('chunk_wall_s', 0.0):.1f} s"),
        ("confidence intervals", f"{100 * summary.get('confidence', 0.9):.0f}% "
                                 f"{summary.get('ci_method', 'wilson')} (binomial, scipy)"),
    ]
    if runtime_s is not None:
        meta.append(("report built in", f"{runtime_s:.1f} s"))
    parts += [f"<dt>{e(k)}</dt><dd>{e(str(v))}</dd>" for k, v in meta]
    parts.append("</dl>")

    parts.append("<h2>Detection threshold</h2>")
    parts.append(_table(thresholds))
    parts.append("<p>Thresholds are on the ranking statistic (network SNR, "
                 "dimensionless); background time in years of time-slid data.</p>")
    if len(thresholds) and thresholds.get("limited", pd.Series(dtype=bool)).any():
        parts.append('<p class="note">The background is too short to reach the requested '
                     "false-alarm rate; the threshold sits just above the loudest background "
                     "event.</p>")

    parts.append("<h2>Efficiency</h2>")
    for key in ("efficiency_snr", "efficiency_distance"):
        if key in figures:
            parts.append(f"<figure>{_img(figures[key])}<figcaption>{e(CAPTIONS[key])}"
                         "</figcaption></figure>")
    parts.append("<h3>Sigmoid fits (50% and 90% efficiency points)</h3>")
    parts.append(_table(sigmoid))
    parts.append("<p>x50 and x90 are in the unit of the quantity fitted "
                 "(<code>fitted_in</code>): network optimal SNR, or distance in Mpc; "
                 "<code>_err</code> columns are one-standard-deviation fit errors.</p>")
    if len(sensitivity):
        parts.append("<h3>Sensitive volume and distance (Planck18 comoving volume)</h3>")
        parts.append(_table(sensitivity))
    parts.append("<h2>Found and missed</h2>")
    if "found_missed" in figures:
        parts.append(f"<figure>{_img(figures['found_missed'])}<figcaption>"
                     f"{e(CAPTIONS['found_missed'])}</figcaption></figure>")
    parts.append("<h2>Parameter recovery</h2>")
    if "recovered" in figures:
        parts.append(f"<figure>{_img(figures['recovered'])}<figcaption>"
                     f"{e(CAPTIONS['recovered'])}</figcaption></figure>")
    parts.append(_table(accuracy))
    parts.append("<p>Errors are recovered minus injected values of found injections "
                 "(median and 90% range): mass in detector-frame solar masses, spin "
                 "dimensionless, (2,2,0) frequency in Hz, damping time and start time "
                 "in s.</p>")
    ov = summary.get("overtones")
    if ov is not None:
        parts.append("<h2>Overtone recovery</h2>")
        parts.append(
            f"<p>Evidence for N = 0..{e(str(ov.get('max_overtones')))} overtones at each "
            f"injection's arrival time (offset {e(str(ov.get('start_offset_ms')))} ms, "
            f"{e(str(ov.get('network')))} amplitudes per detector); an overtone counts as "
            f"supported when log10 B(N:N-1) exceeds {e(str(ov.get('log10_bayes_threshold')))}. "
            f"Analysed: {e(str(ov.get('n_analysed')))} injections; not analysed: "
            f"{e(str(ov.get('n_not_analysed')))}. Population <code>all</code>: every analysed "
            "injection (template count -1); <code>found</code>: found injections per template "
            "overtone count. Also in <code>overtone_efficiency.csv</code>.</p>")
        if "overtone_efficiency" in figures:
            parts.append(f"<figure>{_img(figures['overtone_efficiency'])}<figcaption>"
                         f"{e(CAPTIONS['overtone_efficiency'])}</figcaption></figure>")
        parts.append(_table(overtones.drop(columns=["confidence", "ci_method", "binned_by"],
                                           errors="ignore")))
    parts.append("<h2>Background</h2>")
    if "background" in figures:
        parts.append(f"<figure>{_img(figures['background'])}<figcaption>"
                     f"{e(CAPTIONS['background'])}</figcaption></figure>")
    parts.append("<h2>Efficiency table</h2>")
    parts.append("<p>Also in <code>efficiency.csv</code> beside this report.</p>")
    parts.append(_table(efficiency.drop(columns=["confidence", "ci_method"], errors="ignore")))
    parts.append("<h2>Campaign file</h2>")
    parts.append(f"<pre>{e(toml_text)}</pre>")
    parts.append("</body></html>")
    return write_text(out / "report.html", "\n".join(parts))
