"""The audit as one self-contained HTML page: summary tables and matplotlib plots embedded as
PNG data: URIs, each with alt text that carries its key numbers (readable with images off)."""

from __future__ import annotations

import base64
import html
import io
import re
from dataclasses import dataclass
from typing import Any, Callable, Sequence

import numpy as np

from .audit import BAND_BASE, TRAIN, AuditResult, HomographPair
from .recipe import POLICIES, SPLITS
from .segment import TOKEN_CLASSES, WORD
from .subword_audit import subword_headers, subword_rows

COLOURS = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9")  # Okabe-Ito: colour-blind safe


@dataclass(frozen=True)
class Figure:
    key: str          # id of the <figure> element
    title: str
    alt: str          # what the plot shows, with its numbers, for readers without images
    png: bytes


def _esc(value: Any) -> str:
    return html.escape(str(value), quote=True)


def _pct(value: float | None, digits: int = 2) -> str:
    return "–" if value is None else f"{100 * value:.{digits}f}%"


def _num(value: float | int | None, digits: int = 4) -> str:
    if value is None:
        return "–"
    if isinstance(value, int):
        return f"{value:,}"
    return f"{value:.{digits}g}"


def _render(draw: Callable[[Any], None], size: tuple[float, float] = (7.5, 4.2)) -> bytes:
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.figure import Figure as MplFigure

    fig = MplFigure(figsize=size, dpi=110, layout="constrained")
    draw(fig)
    buffer = io.BytesIO()
    # No "Software" entry: the bytes then depend on the data and matplotlib's renderer only.
    fig.savefig(buffer, format="png", metadata={"Software": None})
    return buffer.getvalue()


def _label_log_axes(ax: Any, xlabel: str, ylabel: str, title: str) -> None:
    """Labels, title, major grid and legend of a log-log curve plot."""
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    ax.set_title(title)
    ax.grid(True, which="major", alpha=0.3)
    ax.legend(frameon=False)


def _rank_frequency(result: AuditResult) -> Figure:
    s = result.summary["languages"]

    def draw(fig: Any) -> None:
        ax = fig.subplots()
        for colour, tag in zip(COLOURS, result.tags):
            freq = result.rank_frequency[tag]
            if not len(freq):
                continue
            # Log-spaced ranks draw the same curve as all of them, at a fraction of the cost.
            ranks = np.unique(np.round(np.geomspace(1, len(freq), 2000)).astype(np.int64))
            ax.loglog(ranks, freq[ranks - 1], color=colour, lw=1.6, label=f"{tag} (observed)")
            z = s[tag]["zipf"]
            if z:
                r = np.geomspace(1, z["max_rank"], 50)
                ax.loglog(r, z["C"] * r ** -z["s"], color=colour, ls="--", lw=1.2,
                          label=f"{tag} Zipf fit, s = {z['s']:.2f}")
        _label_log_axes(ax, "rank (log scale)", "training count (log scale)", "Rank-frequency curves")

    parts = []
    for tag in result.tags:
        z = s[tag]["zipf"]
        freq = result.rank_frequency[tag]
        top = f"the most frequent type occurs {int(freq[0]):,} times" if len(freq) else "no types"
        fit = (f"fitted Zipf exponent s = {z['s']:.3f} (R² {z['r_squared']:.3f}, ranks 1–{z['max_rank']:,})"
               if z else "too few frequent types for a Zipf fit")
        parts.append(f"{tag}: {len(freq):,} types, {top}, {fit}")
    alt = "Log-log plot of training count against frequency rank for both languages. " + "; ".join(parts) + "."
    return Figure("rank-frequency", "Rank-frequency (Zipf) curves", alt, _render(draw))


def _growth(result: AuditResult) -> Figure:
    s = result.summary["languages"]

    def draw(fig: Any) -> None:
        ax = fig.subplots()
        for colour, tag in zip(COLOURS, result.tags):
            curve = np.array(s[tag]["growth"], dtype=float).reshape(-1, 2)
            if len(curve):
                ax.loglog(curve[:, 0], curve[:, 1], "o", ms=3.5, color=colour, label=f"{tag} (observed)")
            h = s[tag]["heaps"]
            if h:
                n = np.geomspace(h["fit_from_tokens"], s[tag]["tokens"], 50)
                ax.loglog(n, h["K"] * n ** h["beta"], color=colour, lw=1.4,
                          label=f"{tag} Heaps fit, K = {h['K']:.1f}, β = {h['beta']:.3f}")
        _label_log_axes(ax, "tokens read, N (log scale)", "distinct types, V (log scale)",
                        "Type-token growth with fitted Heaps' law V = K·N^β")

    parts = []
    for tag in result.tags:
        h = s[tag]["heaps"]
        fit = (f"Heaps fit K = {h['K']:.2f}, beta = {h['beta']:.3f} (R² {h['r_squared']:.3f}, from N = {h['fit_from_tokens']:,})"
               if h else "too little text for a Heaps fit")
        parts.append(f"{tag}: {s[tag]['types']:,} types after {s[tag]['tokens']:,} tokens, {fit}")
    alt = "Log-log plot of distinct types against tokens read, in corpus order. " + "; ".join(parts) + "."
    return Figure("growth", "Type-token growth and Heaps' law", alt, _render(draw))


def _band_label(band: dict[str, Any]) -> str:
    return f"{band['first_rank']:,}–{band['last_rank']:,}"


def _bands(result: AuditResult) -> Figure:
    bands = result.summary["overlap"]["bands"]
    n = max(len(bands[t]) for t in result.tags)

    def draw(fig: Any) -> None:
        ax = fig.subplots()
        width = 0.8 / len(result.tags)
        for i, (colour, tag) in enumerate(zip(COLOURS, result.tags)):
            values = [100 * (b["shared_token_share"] or 0) for b in bands[tag]]
            x = np.arange(len(values)) + (i - (len(result.tags) - 1) / 2) * width
            ax.bar(x, values, width, color=colour, label=tag)
        ticks = [f"{BAND_BASE ** k + 1 if k else 1:,}–{BAND_BASE ** (k + 1):,}" for k in range(n - 1)]
        ticks.append(f"≥ {BAND_BASE ** (n - 1) + 1 if n > 1 else 1:,}")
        ax.set_xticks(np.arange(n), ticks, rotation=20)
        ax.set_xlabel("frequency rank band")
        ax.set_ylabel("tokens that are shared spellings (%)")
        ax.set_ylim(0, 100)
        ax.set_title("Overlap by frequency band (rank in each language's own training text)")
        ax.grid(True, axis="y", alpha=0.3)
        ax.legend(frameon=False)

    parts = []
    for tag in result.tags:
        parts.append(f"{tag}: " + ", ".join(f"ranks {_band_label(b)} {_pct(b['shared_token_share'], 1)}"
                                            for b in bands[tag]))
    alt = "Bar chart of the share of each band's tokens that are spellings shared with the other language. " \
          + "; ".join(parts) + "."
    return Figure("bands", "Overlap by frequency band", alt, _render(draw))


def _scatter(result: AuditResult) -> Figure:
    a, b = result.tags
    rows = result.homographs
    # Unknown first, so that the labelled points are drawn on top of it.
    label_colour = {"unknown": "#999999", "same-meaning": COLOURS[2], "false-friend": COLOURS[1]}

    def draw(fig: Any) -> None:
        ax = fig.subplots()
        if rows:
            x = np.array([r.per_million_a for r in rows])
            y = np.array([r.per_million_b for r in rows])
            if result.has_translations:
                for label, colour in label_colour.items():
                    mask = np.array([r.translation == label for r in rows])
                    if mask.any():
                        ax.scatter(x[mask], y[mask], s=14, color=colour, alpha=0.75, label=label)
            else:
                ax.scatter(x, y, s=14, color=COLOURS[0], alpha=0.6, label="homograph")
            lo, hi = min(x.min(), y.min()) / 2, max(x.max(), y.max()) * 2
            ax.plot([lo, hi], [lo, hi], color="black", lw=0.8, ls=":", label="equal frequency")
            ax.set_xscale("log")
            ax.set_yscale("log")
            labelled = [r for r in rows if r.translation in ("same-meaning", "false-friend")][:8]
            named = labelled + [r for r in rows if r.cls == WORD and r not in labelled][:12 - len(labelled)]
            for r in named:
                ax.annotate(r.surface_a, (r.per_million_a, r.per_million_b), fontsize=8,
                            xytext=(3, 3), textcoords="offset points")
            ax.legend(frameon=False, loc="upper left", bbox_to_anchor=(1.01, 1.0))
        else:
            ax.text(0.5, 0.5, "no homographs", ha="center", va="center", transform=ax.transAxes)
        ax.set_xlabel(f"frequency in {a} (per million words, log scale)")
        ax.set_ylabel(f"frequency in {b} (per million words, log scale)")
        ax.set_title("Homograph frequency in the two languages")
        ax.grid(True, which="major", alpha=0.3)

    if rows:
        above = sum(1 for r in rows if r.per_million_a > r.per_million_b)
        words = [r for r in rows if r.cls == WORD][:5] or list(rows[:5])
        top = ", ".join(f"{r.surface_a} ({r.per_million_a:,.0f} vs {r.per_million_b:,.0f})" for r in words)
        alt = (f"Log-log scatter of {len(rows):,} homographs, frequency per million words in {a} against {b}; "
               f"{above:,} are more frequent in {a}, {len(rows) - above:,} in {b}. Most frequent words: {top}.")
    else:
        alt = "No spelling occurs in both languages' training text, so the scatter is empty."
    return Figure("homograph-scatter", "Homograph frequency, language A against B", alt, _render(draw, (7.5, 5.2)))


def _conditions(result: AuditResult) -> Figure:
    conds = result.summary["conditions"]
    names = list(result.conditions)
    any_held_out = any(conds[c]["coverage"][t][sp]["tokens"] for c in names for t in result.tags
                       for sp in SPLITS if sp != TRAIN)

    def draw(fig: Any) -> None:
        left, right = fig.subplots(1, 2, width_ratios=(1, 1.6))
        x = np.arange(len(names))
        left.bar(x - 0.2, [conds[c]["size"] for c in names], 0.4, color=COLOURS[0], label="built")
        # A subword condition has no uncapped word-level size: no bar (NaN).
        left.bar(x + 0.2, [np.nan if conds[c]["uncapped_size"] is None else conds[c]["uncapped_size"] for c in names],
                 0.4, color=COLOURS[5], label="uncapped")
        left.set_xticks(x, names, rotation=20)
        left.set_ylabel("entries")
        left.set_title("Vocabulary size")
        left.legend(frameon=False, loc="upper center", bbox_to_anchor=(0.5, -0.28), ncols=2)
        series = [(t, sp) for t in result.tags for sp in SPLITS if sp != TRAIN]
        width = 0.8 / len(series)
        for i, (tag, split) in enumerate(series):
            values = [100 * (conds[c]["coverage"][tag][split]["oov_share"] or 0) for c in names]
            colour = COLOURS[result.tags.index(tag)]
            right.bar(x + (i - (len(series) - 1) / 2) * width, values, width, color=colour,
                      alpha=1.0 if split == "valid" else 0.55, label=f"{tag} {split}")
        right.set_xticks(x, names, rotation=20)
        right.set_ylabel("OOV tokens (%)")
        right.set_title("Out-of-vocabulary share")
        right.legend(frameon=False, fontsize=8, loc="upper center", bbox_to_anchor=(0.5, -0.28), ncols=len(series))
        if not any_held_out:
            right.set_ylim(0, 1)
            right.text(0.5, 0.5, "no valid or test text", ha="center", va="center", transform=right.transAxes)
        for ax in (left, right):
            ax.grid(True, axis="y", alpha=0.3)

    parts = []
    for c in names:
        cov = conds[c]["coverage"]
        oov = ", ".join(f"{t} {sp} {_pct(cov[t][sp]['oov_share'])}" for t in result.tags for sp in SPLITS if sp != TRAIN)
        size = (f"{conds[c]['units']} pieces" if conds[c]["uncapped_size"] is None
                else f"uncapped {conds[c]['uncapped_size']:,}")
        parts.append(f"{c}: {conds[c]['size']:,} entries ({size}), OOV {oov}")
    alt = "Bar charts of vocabulary size and out-of-vocabulary share per condition. " + "; ".join(parts) + "."
    return Figure("conditions", "Vocabulary size and coverage per condition", alt, _render(draw, (8.5, 4.2)))


def figures(result: AuditResult) -> list[Figure]:
    """Every plot of the report, in page order."""
    return [_rank_frequency(result), _growth(result), _bands(result), _scatter(result), _conditions(result)]


_NUMERIC_RE = re.compile(r"[+\-–]?[\d,.]+(?:e[+-]?\d+)?%?|–|[\d,]+ / [\d,]+")


def _table(headers: Sequence[str], rows: Sequence[Sequence[Any]], caption: str) -> str:
    """A table whose first column heads the rows; numeric cells are right-aligned."""
    head = "".join(f'<th scope="col">{_esc(h)}</th>' for h in headers)
    body = []
    for row in rows:
        cells = []
        for i, cell in enumerate(row):
            if i == 0:
                cells.append(f'<th scope="row">{_esc(cell)}</th>')
            elif _NUMERIC_RE.fullmatch(str(cell)):
                cells.append(f'<td class="num">{_esc(cell)}</td>')
            else:
                cells.append(f"<td>{_esc(cell)}</td>")
        body.append("<tr>" + "".join(cells) + "</tr>")
    return (f"<table><caption>{_esc(caption)}</caption><thead><tr>{head}</tr></thead>"
            f"<tbody>{''.join(body)}</tbody></table>")


def _figure_html(fig: Figure) -> str:
    # The caption is the title only: the alt text already describes the plot (shown in its place
    # when images are off), and every number in it is also in a table.
    data = base64.b64encode(fig.png).decode("ascii")
    return (f'<figure id="{fig.key}"><img src="data:image/png;base64,{data}" alt="{_esc(fig.alt)}">'
            f"<figcaption>{_esc(fig.title)}</figcaption></figure>")


def _pair_table(rows: Sequence[HomographPair], result: AuditResult, caption: str, top: int, exact: bool) -> str:
    a, b = result.tags
    headers = (["spelling"] if exact else [f"{a} spelling", f"{b} spelling", "kind"]) + [
        "class", f"per million {a}", f"per million {b}", f"Zipf {a}", f"Zipf {b}", "log10 ratio"]
    headers += [f"in {c}" for c in result.conditions]
    headers += [f"attested {t}" for t in result.lexicon_tags]
    if result.has_translations:
        headers.append("translation label")
    body = []
    for r in rows[:top]:
        row: list[Any] = [r.surface_a] if exact else [r.surface_a, r.surface_b, r.kind]
        row += [r.cls, f"{r.per_million_a:,.1f}", f"{r.per_million_b:,.1f}", f"{r.zipf_a:.2f}", f"{r.zipf_b:.2f}",
                f"{r.log10_ratio:+.2f}", *r.in_vocab]
        if a in result.lexicon_tags:
            row.append("yes" if r.attested_a else "no")
        if b in result.lexicon_tags:
            row.append("yes" if r.attested_b else "no")
        if result.has_translations:
            row.append(r.translation)
        body.append(row)
    if not body:
        return f"<p>{_esc(caption)}: none.</p>"
    return _table(headers, body, f"{caption} ({min(top, len(rows)):,} of {len(rows):,}, by combined frequency)")


CSS = """
body{font-family:system-ui,-apple-system,"Segoe UI",Roboto,"DejaVu Sans",sans-serif;max-width:70rem;margin:1.5rem auto;
padding:0 1rem;color:#1a1a1a;line-height:1.45}
h1{font-size:1.6rem;margin-bottom:.2rem}h2{font-size:1.25rem;margin-top:2rem;border-bottom:2px solid #0072B2;padding-bottom:.2rem}
p.meta{color:#555;margin-top:0}
table{border-collapse:collapse;margin:.8rem 0 1.2rem;font-size:.9rem}
caption{text-align:left;font-weight:600;padding:.3rem 0}
th,td{padding:.25rem .6rem;border-bottom:1px solid #ddd;text-align:left;vertical-align:top}
thead th{background:#eef4fa;border-bottom:2px solid #9bb9d6}
td.num{text-align:right;font-variant-numeric:tabular-nums}
figure{margin:1rem 0 1.5rem}figure img{max-width:100%;height:auto;border:1px solid #e2e2e2}
figcaption{font-size:.85rem;color:#444;margin-top:.3rem}
.key{display:grid;grid-template-columns:repeat(auto-fit,minmax(14rem,1fr));gap:.6rem;margin:1rem 0}
.key div{background:#f4f7fa;border-left:4px solid #0072B2;padding:.5rem .7rem}
.key b{display:block;font-size:1.25rem}
.wide{overflow-x:auto}.wide table{font-size:.8rem}.wide th,.wide td{padding:.2rem .4rem}
"""


def render_report(result: AuditResult, top: int = 25) -> str:
    """The whole page as a string (UTF-8, no external resources)."""
    s = result.summary
    tags = result.tags
    a, b = tags
    langs, overlap, sizes = s["languages"], s["overlap"], s["policy_sizes"]
    figs = {f.key: f for f in figures(result)}
    out: list[str] = [
        "<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>bivocab audit: {_esc(s['build']['name'])}</title><style>{CSS}</style></head><body>",
        f"<h1>Vocabulary audit: build “{_esc(s['build']['name'])}”</h1>",
        f'<p class="meta">Languages {_esc(a)} (A) and {_esc(b)} (B); statistics of the {TRAIN} split unless a '
        f"table says otherwise. Formulas of every statistic: docs/audit.md of bivocab. "
        f"build.json sha256 {_esc(s['build']['build_json_sha256'][:16])}…</p>",
        '<section aria-label="key figures"><div class="key">',
        f"<div><b>{overlap['shared_types']['total']:,}</b>shared spellings (homographs)</div>",
        f"<div><b>{overlap['jaccard']['total']:.3f}</b>Jaccard index of the two type sets</div>",
        *[f"<div><b>{_pct(overlap['shared_token_share'][t]['total'], 1)}</b>of {_esc(t)} tokens are shared spellings</div>"
          for t in tags],
        f"<div><b>{sizes['saved_by_sharing']:,}</b>entries saved by the shared policy</div>",
        "</div></section>",
        "<h2>Languages</h2>",
    ]
    rows = []
    for t in tags:
        L = langs[t]
        h, z = L["heaps"], L["zipf"]
        rows.append([t, f"{L['sentences']:,}", f"{L['tokens']:,}", f"{L['types']:,}", _pct(L["hapax_share"]),
                     _num(L["type_token_ratio"]), _num(L["mean_sentence_length"]),
                     f"{h['K']:.2f}" if h else "–", f"{h['beta']:.3f}" if h else "–", f"{z['s']:.3f}" if z else "–"])
    out.append(_table(["language", "sentences", "tokens", "types", "hapax share", "type-token ratio",
                       "mean sentence length", "Heaps K", "Heaps β", "Zipf s"], rows, "Training text per language"))
    rows = []
    for t in tags:
        for c in TOKEN_CLASSES:
            L = langs[t]["by_class"][c]
            rows.append([f"{t} {c}", f"{L['tokens']:,}", f"{L['types']:,}", _pct(L["hapax_share"]),
                         _num(L["type_token_ratio"]), _num(L["mean_sentence_length"])])
    out.append(_table(["language and class", "tokens", "types", "hapax share", "type-token ratio",
                       "tokens per sentence"], rows, "Per token class"))
    rows = [[t, *[f"{langs[t]['splits'][sp]['sentences']:,} / {langs[t]['splits'][sp]['tokens']:,}" for sp in SPLITS]]
            for t in tags]
    out.append(_table(["language", *[f"{sp}: sentences / tokens" for sp in SPLITS]], rows, "Splits"))
    out += [_figure_html(figs["rank-frequency"]), _figure_html(figs["growth"])]

    out.append("<h2>Overlap of the two vocabularies</h2>")
    rows = [[c, f"{overlap['shared_types'][c]:,}", f"{overlap['union_types'][c]:,}", _num(overlap["jaccard"][c]),
             *[_pct(overlap["shared_token_share"][t][c]) for t in tags]] for c in ("total", *TOKEN_CLASSES)]
    out.append(_table(["class", "shared types |A∩B|", "union |A∪B|", "Jaccard", *[f"shared share of {t} tokens" for t in tags]],
                      rows, "Shared spellings by class"))
    for t in tags:
        rows = [[_band_label(band), f"{band['types']:,}", f"{band['shared_types']:,}", _pct(band["shared_type_share"]),
                 f"{band['tokens']:,}", _pct(band["shared_token_share"])] for band in overlap["bands"][t]]
        out.append(_table(["rank band", "types", "shared types", "shared type share", "tokens", "shared token share"],
                          rows, f"Overlap by frequency band, {t}"))
    out.append(_figure_html(figs["bands"]))
    out.append("<h2>Vocabulary size of each policy (no cap, min_count 1)</h2>")
    union = overlap["union_types"]["total"]
    tagged_classes = [c for c, choice in POLICIES["word-tagged"].items() if choice == "tagged"]
    tagged = {t: sum(langs[t]["by_class"][c]["types"] for c in tagged_classes) for t in tags}
    other_union = sum(overlap["union_types"][c] for c in TOKEN_CLASSES if c not in tagged_classes)
    out.append(_table(["policy", "entries", "identity"], [
        ["shared", f"{sizes['shared']:,}", f"|A∪B| + specials = {union:,} + {sizes['specials']}"],
        ["word-tagged", f"{sizes['word-tagged']:,}",
         f"|A tagged| + |B tagged| + |A other ∪ B other| + specials = {tagged[a]:,} + {tagged[b]:,} + "
         f"{other_union:,} + {sizes['specials']} (tagged: {', '.join(tagged_classes)})"],
        ["fully-tagged", f"{sizes['fully-tagged']:,}",
         f"|A| + |B| + specials = {sizes[f'types_{a}']:,} + {sizes[f'types_{b}']:,} + {sizes['specials']}"],
    ], "Uncapped vocabulary size per policy"))
    out.append(f"<p>Keeping the two languages apart costs {sizes['saved_by_sharing']:,} more entries than sharing "
               f"them: the sum |A| + |B| = {sizes[f'types_{a}'] + sizes[f'types_{b}']:,} against the combined "
               f"|A∪B| = {union:,}.</p>")

    out.append("<h2>Coverage of each condition</h2>")
    rows = []
    for name in result.conditions:
        c = s["conditions"][name]
        rows.append([name, c["policy"], f"{c['size']:,}",
                     "–" if c["uncapped_size"] is None else f"{c['uncapped_size']:,}",
                     *[_pct(c["coverage"][t][sp]["oov_share"]) for t in tags for sp in SPLITS]])
    out.append('<div class="wide">' + _table(["condition", "policy", "size", "uncapped size",
                                              *[f"OOV {t} {sp}" for t in tags for sp in SPLITS]],
                                             rows, "Share of tokens out of vocabulary") + "</div>")
    subword = [n for n in result.conditions if s["conditions"][n]["uncapped_size"] is None]
    if subword:
        out.append(f"<p>Subword conditions ({_esc(', '.join(subword))}): the share of pieces that are the unknown "
                   "piece; they have no word-level uncapped size.</p>")
    rows = []
    for name in result.conditions:
        for t in tags:
            for sp in SPLITS:
                if sp == TRAIN:
                    continue
                cov = s["conditions"][name]["coverage"][t][sp]
                words = ", ".join(f"{o['surface']} ({o['count']})" for o in cov["top_oov"][:10]) or "none"
                rows.append([f"{name} {t} {sp}", f"{cov['oov_types']:,}", words])
    out.append(_table(["condition, language, split", "OOV types", "most frequent OOV types (count)"], rows,
                      "Most frequent out-of-vocabulary types"))
    out.append(_figure_html(figs["conditions"]))
    if "subword" in s:
        sub = s["subword"]
        out.append("<h2>Subword conditions</h2>")
        out.append(f"<p>Counted on the {_esc(sub['split'])} split. Out of vocabulary for a subword condition means "
                   "the unknown piece (with byte fallback every character has pieces). Fertility = pieces per word "
                   "and continued words = words of two or more pieces (Rust et al. 2021); parity = fertility "
                   f"{_esc(a)} / fertility {_esc(b)}, so pieces per word: the text is comparable, not parallel "
                   "(Petrov et al. 2023 define parity on parallel text, per translated sentence). Pieces used by "
                   "both: non-special ids found in both languages' shards.</p>")
        out.append('<div class="wide">' + _table(subword_headers(tags), subword_rows(sub, tags),
                                                 "Subword conditions: fertility, continued words, parity, "
                                                 "shared pieces") + "</div>")
        rows = []
        for name, c in sub["conditions"].items():
            ident = c["size_identity"]
            pieces = " + ".join(f"{ident['model_pieces'][t]:,}" for t in tags)
            rows.append([name, f"{ident['specials']}", pieces, f"{ident['pieces_in_both_models']:,}",
                         f"{ident['shared_entries']:,}", f"{ident['size']:,}", "holds" if ident["holds"] else "FAILS"])
        out.append(_table(["condition", "specials", f"model pieces {a} + {b}", "pieces in both models",
                           "shared entries", "size", "specials + pieces − both = size"], rows,
                          "Subword size identities"))

    out.append("<h2>Homographs</h2>")
    h = s["homographs"]
    lines = [f"{h['count']:,} spellings occur in the training text of both languages."]
    if "translation_labels" in h:
        lines.append("Translation labels: " + ", ".join(f"{k} {v:,}" for k, v in h["translation_labels"].items()) + ".")
    if "attested" in h:
        lines.append("Attested in the word lists: " + ", ".join(f"{k} {v:,}" for k, v in h["attested"].items()) + ".")
    out.append("<p>" + _esc(" ".join(lines)) + "</p>")
    out.append(_figure_html(figs["homograph-scatter"]))
    out.append('<div class="wide">' + _pair_table(result.homographs, result, "Homographs", top, exact=True) + "</div>")
    v = s["variants"]
    out.append("<h2>Case and diacritic variants</h2>")
    out.append(f"<p>{v['count']:,} pairs of spellings become shared only after case folding or stripping marks "
               f"(case {v['by_kind']['case']:,}, marks {v['by_kind']['marks']:,}, both {v['by_kind']['case+marks']:,}); "
               "no policy folds them unless the recipe lowercases.</p>")
    out.append('<div class="wide">' + _pair_table(result.variants, result, "Variants", top, exact=False) + "</div>")
    n = s["near_homographs"]
    out.append("<h2>Near-homographs (edit distance 1)</h2>")
    out.append(f"<p>{n['count']:,} pairs of unshared words differ by one inserted, deleted or substituted character.</p>")
    out.append('<div class="wide">' + _pair_table(result.near, result, "Near-homographs", top, exact=False) + "</div>")
    out.append("</body></html>")
    return "\n".join(out) + "\n"
