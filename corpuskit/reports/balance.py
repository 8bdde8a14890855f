"""The balance report: how much of each dialect, source, medium, script and contributor.

Streams documents once (``Accumulator.add``), then writes CSV tables and a
self-contained HTML page with matplotlib plots embedded as PNG data.
"""
from __future__ import annotations

import base64
import bisect
import html
import io
import itertools
from collections import Counter, defaultdict
from pathlib import Path


from ..sheets import csv_text as _csv, neutralise_cell
from ..words import words_of
from ..storage import atomic_write_text
from .stats import effective_number, heaps_fit, imbalance_ratio, jaccard, shannon_entropy, temperature_weights

AXES = ("dialect", "source", "medium", "script", "contributor")
TYPE_AXES = ("dialect", "source", "medium", "script")


class Accumulator:
    """Counts per dialect, source, medium, script and contributor; word types; and the order in
    which each dialect's types first appear (type-token growth).  Filled document by document
    (``add``) in one partition, then partitions are combined in order (``state``, ``merge``)."""

    def __init__(self, language: str = ""):
        self.language = language
        self.rows = {a: defaultdict(Counter) for a in AXES}
        self.types = {a: defaultdict(set) for a in TYPE_AXES}
        self.firsts: dict[str, list[int]] = defaultdict(list)    # dialect -> token positions of new types
        self._new_words: dict[str, list] = defaultdict(list)      # dialect -> [position, word] (for state)

    def add(self, doc: dict) -> None:
        words = [w.casefold() for w in words_of(doc["segments"], self.language)]
        d = doc.get("dialect") or "unknown"
        seen, start = self.types["dialect"][d], self.rows["dialect"][d]["words"]
        for k, w in enumerate(words):
            if w not in seen:
                seen.add(w)
                self.firsts[d].append(start + k)
                self._new_words[d].append([start + k, w])
        self._count(doc, words)

    def _count(self, doc: dict, words: list[str]) -> None:
        chars = sum(len(s) for s in doc["segments"])
        for a in AXES:
            key = doc.get(a) or "unknown"
            c = self.rows[a][key]
            c["documents"] += 1
            c["segments"] += len(doc["segments"])
            c["words"] += len(words)
            c["characters"] += chars
            if a in self.types:
                self.types[a][key].update(words)

    def state(self) -> dict:
        """Everything ``merge`` needs, as JSON-ready values."""
        return {"rows": {a: {k: dict(c) for k, c in sorted(v.items())} for a, v in self.rows.items()},
                "types": {a: {k: sorted(s) for k, s in sorted(v.items())} for a, v in self.types.items()},
                "new_words": dict(sorted(self._new_words.items()))}

    def merge(self, state: dict) -> None:
        """Add a later partition's ``state``: types it met first move to this position in the stream."""
        for d, new_words in state["new_words"].items():
            seen, start = self.types["dialect"][d], self.rows["dialect"][d]["words"]
            for position, w in new_words:
                if w not in seen:
                    seen.add(w)
                    self.firsts[d].append(start + position)
        for a, groups in state["rows"].items():
            for key, c in groups.items():
                self.rows[a][key].update(c)
        for a, groups in state["types"].items():
            for key, words in groups.items():
                self.types[a][key].update(words)

    @property
    def growth(self) -> dict[str, list[tuple[int, int]]]:
        """Per dialect, (tokens, types) after 1 token and then at steps of 25% more tokens, and at the end."""
        out = {}
        for d, positions in sorted(self.firsts.items()):
            total = self.rows["dialect"][d]["words"]
            points, t = [], 1
            while t < total:
                points.append((t, bisect.bisect_left(positions, t)))
                t = int(t * 1.25) + 1
            out[d] = points + [(total, len(positions))]
        return out

    def table(self, axis: str) -> list[dict]:
        total = {k: sum(c[k] for c in self.rows[axis].values()) for k in ("documents", "segments", "words", "characters")}
        out = []
        for key in sorted(self.rows[axis]):
            c = self.rows[axis][key]
            row = {axis: key, **{k: c[k] for k in ("documents", "segments", "words", "characters")}}
            if axis in self.types:
                row["types"] = len(self.types[axis][key])
            for k in ("documents", "words"):
                row[f"{k}_share"] = round(c[k] / total[k], 4) if total[k] else 0.0
            out.append(row)
        return out


_GRAPHEME = None


def _context(text: str, at: int, width: int = 15) -> str:
    """About ``width`` characters either side of position ``at``, cut between grapheme clusters."""
    global _GRAPHEME
    if _GRAPHEME is None:
        import regex
        _GRAPHEME = regex.compile(r"\X")
    lo = max(0, at - width - 8)
    window = text[lo:at + width + 8]
    bounds = [lo + m.start() for m in _GRAPHEME.finditer(window)] + [lo + len(window)]
    start = max([b for b in bounds if b <= max(0, at - width)], default=lo)
    end = min([b for b in bounds if b >= min(len(text), at + width)], default=lo + len(window))
    return text[start:end]


class ScriptInventory:
    """Characters by script per source and dialect, with example contexts for unexpected ones."""

    def __init__(self):
        self.chars = Counter()
        self.examples: dict[tuple, str] = {}

    def add(self, doc: dict, examples: bool = True) -> None:
        """Count the document's characters; with ``examples`` False (a source that may not be
        redistributed) its text gives no example contexts."""
        self.add_many([(doc, examples)])

    def add_many(self, docs: list[tuple[dict, bool]]) -> None:
        """``add`` for each (document, examples) in order, counted per source and dialect over all
        their text at once (numpy over code points); a character met for the first time takes its
        example from the first of these documents that holds it."""
        import numpy as np
        from ..pii import PLACEHOLDER
        from ..scripts import char_script
        groups: dict[tuple[str, str], list[tuple[list[str], bool]]] = defaultdict(list)
        for doc, examples in docs:
            # <PHONE> and its kin are the pipeline's, not the text's
            segments = [PLACEHOLDER.sub(" ", s) if "<" in s else s for s in doc["segments"]]
            groups[(doc["source"], doc.get("dialect") or "unknown")].append((segments, examples))
        for (source, dialect), members in groups.items():
            texts = ["\n".join(segments) for segments, _ in members]
            joined = "\n".join(texts)
            if not joined:
                continue
            starts = list(itertools.accumulate((len(t) + 1 for t in texts), initial=0))
            code_points = np.frombuffer(joined.encode("utf-32-le", "surrogatepass"), dtype="<u4")
            counts = np.bincount(code_points)
            for cp in np.flatnonzero(counts).tolist():
                ch = chr(cp)
                if ch.isspace():
                    continue
                key = (source, dialect, char_script(ch), ch)
                self.chars[key] += int(counts[cp])
                if key not in self.examples:             # the context of its first occurrence
                    segments, examples = members[bisect.bisect_right(starts, joined.index(ch)) - 1]
                    seg = next(s for s in segments if ch in s)
                    self.examples[key] = _context(seg, seg.index(ch)) if examples else "(restricted source)"

    def state(self) -> list:
        return [[*key, n, self.examples[key]] for key, n in sorted(self.chars.items())]

    def merge(self, state: list) -> None:
        for *key, n, example in state:
            key = tuple(key)
            self.chars[key] += n
            self.examples.setdefault(key, example)

    def csv(self) -> str:
        import csv as _csv
        import unicodedata
        buf = io.StringIO()
        w = _csv.writer(buf, lineterminator="\n")
        w.writerow(["source", "dialect", "script", "character", "code_point", "name", "count", "example"])
        for key in sorted(self.chars):
            src, dia, sc, ch = key
            w.writerow([neutralise_cell(x) for x in (src, dia, sc, ch, f"U+{ord(ch):04X}", unicodedata.name(ch, ""))]
                       + [self.chars[key], neutralise_cell(self.examples[key])])
        return buf.getvalue()


def _png(fig) -> str:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=90, metadata={"Software": None}, bbox_inches="tight")
    import matplotlib.pyplot as plt
    plt.close(fig)
    return base64.b64encode(buf.getvalue()).decode()


def _plots(acc: Accumulator, overlap: dict) -> list[tuple[str, str]]:
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    plt.rcParams["svg.hashsalt"] = "corpuskit"
    out = []
    for axis in ("dialect", "source", "medium"):
        rows = acc.table(axis)
        fig, axes = plt.subplots(1, 2, figsize=(8, 0.4 * len(rows) + 1.4), sharey=True)
        for ax, measure, colour in zip(axes, ("documents", "words"), ("#4477aa", "#cc6677")):
            values = [r[measure] for r in rows]
            total = sum(values) or 1
            ax.barh([r[axis] for r in rows], values, color=colour)
            for y, v in enumerate(values):
                ax.text(v, y, f" {v / total:.0%}", va="center", fontsize=8)
            ax.set_xlabel(measure)
            ax.set_xlim(0, max(values + [1]) * 1.25)
        axes[0].invert_yaxis()
        fig.suptitle(f"Documents and words per {axis}")
        out.append((f"Documents and words per {axis}", _png(fig)))
    fig, ax = plt.subplots(figsize=(6.5, 4))
    styles = ["-", "--", ":", "-."]
    markers = ["o", "s", "^", "D", "v", "x"]
    for k, (d, pts) in enumerate(sorted(acc.growth.items())):
        if pts:   # line style and marker differ, so lines that overlap stay visible
            ax.plot([t for t, _ in pts], [v for _, v in pts], linestyle=styles[k % len(styles)],
                    marker=markers[k % len(markers)], markersize=4, label=d, alpha=0.85)
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlabel("tokens")
    ax.set_ylabel("types")
    ax.set_title("Type-token growth per dialect")
    ax.legend()
    out.append(("Type-token growth per dialect (log-log)", _png(fig)))
    names = sorted(overlap)
    if names:
        fig, ax = plt.subplots(figsize=(4.5, 4))
        m = [[overlap[a][b] for b in names] for a in names]
        im = ax.imshow(m, vmin=0, vmax=1, cmap="viridis")
        ax.set_xticks(range(len(names)), names, rotation=45, ha="right")
        ax.set_yticks(range(len(names)), names)
        for i in range(len(names)):
            for j in range(len(names)):
                ax.text(j, i, f"{m[i][j]:.2f}", ha="center", va="center", color="white" if m[i][j] < 0.6 else "black")
        fig.colorbar(im)
        ax.set_title("Vocabulary overlap (Jaccard)")
        out.append(("Vocabulary overlap between dialects (Jaccard)", _png(fig)))
    return out


HEADERS = {"documents_share": "share of documents", "words_share": "share of words", "entropy_bits": "entropy (bits)",
           "effective_number": "effective number", "imbalance_ratio": "largest / smallest", "oov_rate_against_rest":
           "words not in other dialects", "natural_share": "natural share", "sampling_share": "sampling share",
           "expected_words": "expected words", "weight_per_word": "weight per word", "K": "K", "beta": "β"}


def _header(key: str) -> str:
    return HEADERS.get(key, key.replace("_", " "))


def _cell(key: str, value) -> str:
    if isinstance(value, bool) or value is None:
        return "" if value is None else ("yes" if value else "no")
    if isinstance(value, int):
        return f"{value:,}"
    if isinstance(value, float):
        if "share" in key or "rate" in key:
            return f"{value:.1%}"
        return f"{value:,.2f}" if abs(value) >= 10 else f"{value:.3g}"
    return str(value)


def _html_table(rows: list[dict], mark: set[str] | None = None) -> str:
    """A table with readable headers and numbers; rows whose first cell is in ``mark`` are flagged."""
    if not rows:
        return "<p>none</p>"
    head = "".join(f"<th>{html.escape(_header(k))}</th>" for k in rows[0])
    body = []
    for r in rows:
        first = str(next(iter(r.values())))
        flag = " class='restricted' title='not for redistribution'" if mark and first in mark else ""
        body.append(f"<tr{flag}>" + "".join(f"<td>{html.escape(_cell(k, v))}</td>" for k, v in r.items()) + "</tr>")
    return f"<div class='scroll'><table><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table></div>"


def _extremes(rows: list[dict], axis: str) -> str:
    if not rows:
        return "none"
    big = max(rows, key=lambda r: (r["documents_share"], r["words_share"]))
    small = min(rows, key=lambda r: (r["documents_share"], r["words_share"]))
    text = (f"largest <b>{html.escape(big[axis])}</b> ({big['documents_share']:.0%} of documents, "
            f"{big['words_share']:.0%} of words)")
    if len(rows) > 1:
        text += (f"; smallest <b>{html.escape(small[axis])}</b> ({small['documents_share']:.0%} of documents, "
                 f"{small['words_share']:.0%} of words)")
    return text


def _summary(acc: Accumulator, tables: dict, measures: dict, warnings: list[str], restricted: set[str]) -> str:
    """The one-screen summary at the top of the page."""
    docs = sum(r["documents"] for r in tables["dialect"])
    words = sum(r["words"] for r in tables["dialect"])
    dia = measures["dialect"]
    restricted_docs = sum(r["documents"] for r in tables["source"] if r["source"] in restricted)
    reading = (f"Across dialects the corpus is as diverse as {dia['effective_number']:.1f} equally large dialects "
               f"would be ({dia['groups']} present; entropy {dia['entropy_bits']:.2f} bits of a possible "
               f"{max(0.0, __import__('math').log2(dia['groups'])) if dia['groups'] else 0:.2f}).")
    items = [f"<li><b>{docs:,}</b> documents, <b>{words:,}</b> words"
             + (f"; {restricted_docs:,} documents ({restricted_docs / docs:.0%}) from sources that may not be "
                "redistributed" if docs and restricted_docs else "") + "</li>",
             f"<li>Dialects: {_extremes(tables['dialect'], 'dialect')}</li>",
             f"<li>Sources: {_extremes(tables['source'], 'source')}</li>",
             f"<li>{reading}</li>"]
    box = ""
    if warnings:
        box = ("<div class='warn'><strong>Warnings of this run</strong><ul>"
               + "".join(f"<li>{html.escape(w)}</li>" for w in warnings) + "</ul></div>")
    links = " · ".join(f"<a href='#{a}'>{a}</a>" for a in AXES) + " · <a href='#growth'>growth</a> · " \
        "<a href='#sampling'>sampling</a> · <a href='#plots'>plots</a>"
    return f"<section id='summary'><h2>Summary</h2><ul>{''.join(items)}</ul>{box}<p class='links'>{links}</p></section>"


def plots(acc: Accumulator) -> list[tuple[str, str]]:
    """The report's figures (title, PNG in base64); they depend on the counts alone."""
    return _plots(acc, _overlap(acc.types["dialect"]))


def _overlap(vocab: dict[str, set]) -> dict[str, dict[str, float]]:
    """Jaccard overlap of each two dialects' vocabularies."""
    names = sorted(vocab)
    return {a: {b: round(jaccard(vocab[a], vocab[b]), 4) for b in names} for a in names}


def write_report(folder: Path, acc: Accumulator, params, recipe, run_warnings: list[str] = (),
                 figures: list[tuple[str, str]] | None = None) -> dict:
    """The balance tables, measures and balance.html; ``figures`` from ``plots`` if made already."""
    folder.mkdir(parents=True, exist_ok=True)
    tables = {a: acc.table(a) for a in AXES}
    for a, rows in tables.items():
        atomic_write_text(folder / f"balance-{a}.csv", _csv(rows))
    measures = {}
    for a in ("dialect", "source"):
        words = [r["words"] for r in tables[a]]
        measures[a] = {"entropy_bits": round(shannon_entropy(words), 4), "effective_number": round(effective_number(words), 4),
                       "groups": len(words), "imbalance_ratio": round(imbalance_ratio(words), 4)}
    heaps = []
    for d, pts in sorted(acc.growth.items()):
        k, beta = heaps_fit(pts)
        heaps.append({"dialect": d, "K": round(k, 3) if k == k else None, "beta": round(beta, 4) if beta == beta else None,
                      "tokens": acc.rows["dialect"][d]["words"], "types": len(acc.types["dialect"][d])})
    vocab = acc.types["dialect"]
    names = sorted(vocab)
    overlap = _overlap(vocab)
    oov = []
    for a in names:
        rest = set().union(*(vocab[b] for b in names if b != a)) if len(names) > 1 else set()
        oov.append({"dialect": a, "types": len(vocab[a]),
                    "oov_rate_against_rest": round(len(vocab[a] - rest) / len(vocab[a]), 4) if vocab[a] else 0.0})
    sizes = {r["dialect"]: r["words"] for r in tables["dialect"]}
    total = sum(sizes.values())
    # Documents without a dialect are no dialect: they keep their natural share, and the temperature
    # is applied among the dialects to the rest.
    unknown = sizes.get("unknown", 0)
    known = {d: n for d, n in sizes.items() if d != "unknown"}
    q = {d: w * (1 - unknown / total) for d, w in temperature_weights(known, params.alpha).items()} if total else {}
    if "unknown" in sizes:
        q["unknown"] = unknown / total if total else 0.0
    sampling = [{"dialect": d, "words": sizes[d], "natural_share": round(sizes[d] / total, 4) if total else 0,
                 "sampling_share": round(q[d], 4), "expected_words": round(q[d] * total),
                 "weight_per_word": round(q[d] / (sizes[d] / total), 4) if sizes[d] else 0} for d in sorted(sizes)]
    warnings = [f"dialect '{r['dialect']}' has {r['words_share']:.1%} of the words, under the floor {params.dialect_floor:.0%}"
                for r in tables["dialect"] if r["words_share"] < params.dialect_floor and r["dialect"] != "unknown"]
    warnings += [f"medium '{r['medium']}' has {r['words_share']:.1%} of the words, under the floor {params.medium_floor:.0%}"
                 for r in tables["medium"] if r["words_share"] < params.medium_floor]
    if unknown:
        warnings.append(f"{unknown / total:.1%} of the words come from documents without a dialect; they keep their "
                        "natural share in the sampling weights (give the source or its rows a dialect)")
    atomic_write_text(folder / "balance-heaps.csv", _csv(heaps))
    atomic_write_text(folder / "balance-overlap.csv", _csv([{"dialect": a, **overlap[a]} for a in names]))
    atomic_write_text(folder / "balance-oov.csv", _csv(oov))
    atomic_write_text(folder / "sampling-weights.csv", _csv(sampling))
    figures = _plots(acc, overlap) if figures is None else figures
    restricted = {src.id for src in recipe.sources if not src.redistributable}
    style = ("body{font-family:system-ui,sans-serif;max-width:1000px;margin:1.5em auto;padding:0 1em;color:#222;line-height:1.4}"
             "table{border-collapse:collapse;margin:.5em 0}td,th{border:1px solid #ccc;padding:3px 8px;text-align:right}"
             "th{background:#eee}td:first-child,th:first-child{text-align:left}.scroll{overflow-x:auto}"
             "tr.restricted td:first-child::after{content:' (restricted)';color:#a33}"
             ".warn{background:#fff3cd;border:1px solid #e0c36b;padding:.3em 1em;margin:1em 0}"
             "img{max-width:100%;height:auto}.links a{margin:0 .2em}")
    parts = [f"<!doctype html><html lang='en'><head><meta charset='utf-8'>"
             "<meta name='viewport' content='width=device-width, initial-scale=1'>"
             f"<title>Balance: {html.escape(recipe.corpus.name)}</title><style>{style}</style></head><body>",
             f"<h1>Balance of the corpus “{html.escape(recipe.corpus.name)}” ({html.escape(recipe.corpus.language)})</h1>",
             _summary(acc, tables, measures, list(run_warnings) + warnings, restricted)]
    parts.append("<h2>Diversity</h2>" + _html_table([{"over": a, **m} for a, m in measures.items()]))
    parts.append("<p>Entropy in bits over the share of words; effective number = 2<sup>H</sup>; "
                 "largest / smallest: the largest group's words over the smallest group's.</p>")
    for a in AXES:
        parts.append(f"<h2 id='{a}'>By {a}</h2>" + _html_table(tables[a], restricted if a == "source" else None))
    parts.append("<h2 id='growth'>Heaps' law per dialect (V = K·T<sup>β</sup>)</h2>" + _html_table(heaps))
    parts.append("<h2>Words of each dialect found in no other</h2>" + _html_table(oov))
    parts.append(f"<h2 id='sampling'>Temperature sampling across dialects (α = {params.alpha})</h2>" + _html_table(sampling))
    parts.append("<div id='plots'></div>")
    for title, data in figures:
        parts.append(f"<h2>{html.escape(title)}</h2><img alt='{html.escape(title)}' src='data:image/png;base64,{data}'>")
    parts.append("</body></html>\n")
    atomic_write_text(folder / "balance.html", "\n".join(parts))
    return {"measures": measures, "tables": tables, "heaps": heaps, "oov": oov, "sampling": sampling, "warnings": warnings}
