"""``report.html``: one self-contained page per results folder (figures embedded), readable when printed.

Built from the tables and figures already made for the folder; it adds no numbers of its own.
"""

from __future__ import annotations

import base64
import datetime as _dt
import html
from pathlib import Path

import pandas as pd

from .._version import __version__

STYLE = """
body { font-family: "DejaVu Sans", Arial, sans-serif; max-width: 1100px; margin: 2em auto; color: #222;
       line-height: 1.45; padding: 0 1em; }
h1 { font-size: 1.6em; margin-bottom: 0.2em; } h2 { font-size: 1.25em; border-bottom: 1px solid #ccc;
padding-bottom: 0.2em; margin-top: 1.8em; }
table { border-collapse: collapse; font-size: 0.85em; margin: 0.6em 0; }
th, td { border: 1px solid #ccc; padding: 0.25em 0.5em; text-align: right; }
th { background: #f0f0f0; } td:first-child, th:first-child { text-align: left; }
.verdict { padding: 0.8em 1em; border-radius: 6px; margin: 1em 0; }
.pass { background: #e6f4ea; border: 1px solid #7cb88f; } .warn { background: #fff6e0; border: 1px solid #e0b44c; }
.fail { background: #fde8e8; border: 1px solid #d77; }
.caution { background: #fff3f0; border-left: 4px solid #c0392b; padding: 0.6em 1em; margin: 1em 0; }
figure { margin: 1em 0; page-break-inside: avoid; } figure img { max-width: 100%; border: 1px solid #eee; }
figcaption { font-size: 0.85em; color: #555; }
pre { background: #f7f7f7; padding: 0.8em; font-size: 0.8em; white-space: pre-wrap; }
.meta { color: #666; font-size: 0.85em; }
@media print { body { margin: 0; max-width: none; } h2 { page-break-after: avoid; } a { color: inherit; } }
"""

VERDICT_WORDS = {
    "pass": "The sampler shows no sign of trouble: the chains agree, the effective sample sizes are large enough "
    "and there were no divergences. The numbers below can be used.",
    "warn": "The sampler needs attention before these numbers are used; the advice below says what to do.",
    "fail": "The sampler failed: these numbers must not be used. Follow the advice below and fit again.",
}


def image(path: Path, caption: str) -> str:
    """A figure with the PNG embedded as base64 (no link to any file or network)."""
    data = base64.b64encode(path.read_bytes()).decode("ascii")
    return (
        f'<figure><img alt="{html.escape(caption)}" src="data:image/png;base64,{data}">'
        f"<figcaption>{html.escape(caption)}</figcaption></figure>"
    )


def table(frame: pd.DataFrame, digits: int = 4) -> str:
    """An HTML table; a value that does not apply (NaN, or None in a column of flags) is an empty cell."""
    text = {c: frame[c].where(frame[c].notna(), "") for c in frame.columns if frame[c].dtype == object}
    return frame.assign(**text).to_html(
        index=False, float_format=lambda v: f"{v:.{digits}g}", na_rep="", border=0, escape=True
    )


def page(title: str, sections: list[str]) -> str:
    created = _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%d %H:%M UTC")
    return (
        '<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
        f"<title>{html.escape(title)}</title><style>{STYLE}</style></head><body>"
        f'<h1>{html.escape(title)}</h1><p class="meta">Arrhenia {__version__}, {created}</p>'
        + "".join(sections)
        + "</body></html>\n"
    )


def section(heading: str, body: str) -> str:
    return f"<h2>{html.escape(heading)}</h2>{body}"


def paragraphs(lines: list[str], css: str = "") -> str:
    attribute = f' class="{css}"' if css else ""
    return "".join(f"<p{attribute}>{html.escape(line)}</p>" for line in lines)


def fit_report(
    folder: Path,
    *,
    title: str,
    study_lines: list[str],
    diagnostics: dict,
    summary: pd.DataFrame,
    tables: dict[str, pd.DataFrame],
    correlations: pd.DataFrame,
    extrapolations: list[str],
    caution: str,
    figures: list[tuple[str, str]],
    arrhenius_notes: list[str] | None = None,
) -> str:
    """The report of one fit; ``figures`` are (file inside ``folder``, caption); ``arrhenius_notes``: sentences on the
    rate constants fitted at each temperature (whether they bend away from the Arrhenius line), shown above the
    figures."""
    verdict = diagnostics["verdict"]
    advice = diagnostics.get("advice") or []
    numbers = (
        f"max R-hat {diagnostics['r_hat_max']:.3f}; min ESS bulk {diagnostics['ess_bulk_min']:.0f}, tail "
        f"{diagnostics['ess_tail_min']:.0f}; {diagnostics['divergences']} divergences; "
        f"{diagnostics['tree_depth_hits']} tree-depth hits; min BFMI {diagnostics['bfmi_min']:.2f}; "
        f"{diagnostics.get('solver_failures', 0)} failed integrations; "
        f"{diagnostics['predictive_coverage_90']:.0%} of measurements inside their 90 % predictive interval"
    )
    verdict_html = (
        f'<div class="verdict {verdict}"><strong>Diagnostics: {verdict.upper()}.</strong> '
        f'{html.escape(VERDICT_WORDS[verdict])}<br><span class="meta">{html.escape(numbers)}</span>'
        + ("<ul>" + "".join(f"<li>{html.escape(a)}</li>" for a in advice) + "</ul>" if advice else "")
        + "</div>"
    )
    sections = [
        verdict_html,
        section("Study", f"<pre>{html.escape(chr(10).join(study_lines))}</pre>"),
        section("Parameters (posterior)", table(summary)),
    ]
    if "classical.csv" in tables:
        sections.append(
            section(
                "Classical estimates beside them",
                "<p>Least squares of ln k on 1/T (95 % confidence "
                "intervals) and the two-point estimate.</p>" + table(tables["classical.csv"]),
            )
        )
    sections.append(
        section(
            "Why the reference temperature matters",
            "<p>Posterior correlation of ln A with Ea, next to that of ln k_ref with Ea.</p>" + table(correlations, 3),
        )
    )
    if arrhenius_notes:
        sections.append(section("Rate constants at each temperature", paragraphs(arrhenius_notes)))
    sections.append(section("Figures", "".join(image(folder / name, caption) for name, caption in figures)))
    sections.append(
        section("Cautions", paragraphs(extrapolations) + f'<div class="caution">{html.escape(caution)}</div>')
    )
    return page(title, sections)


def simple_report(
    folder: Path,
    *,
    title: str,
    intro: list[str],
    tables: list[tuple[str, pd.DataFrame]],
    figures: list[tuple[str, str]],
    cautions: list[str],
) -> str:
    """A report of a comparison or of predictions: sentences, tables, figures and cautions."""
    sections = [paragraphs(intro)]
    sections += [section(heading, table(frame)) for heading, frame in tables]
    if figures:
        sections.append(section("Figures", "".join(image(folder / name, caption) for name, caption in figures)))
    if cautions:
        sections.append(section("Cautions", "".join(f'<div class="caution">{html.escape(c)}</div>' for c in cautions)))
    return page(title, sections)
