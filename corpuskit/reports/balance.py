"""The balance report: how much of each dialect, source, medium, script and contributor.

Streams documents once (``Accumulator.add``), then writes CSV tables and a
self-contained HTML page with matplotlib plots embedded as PNG data.
"""
from __future__ import annotations

import base64
import bisect
import html
import io
from collections import Counter, defaultdict
from pathlib import Path


from ..sheets import csv_text as _csv, neutralise_cell
from ..words import words as split_words
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
        words = [w.casefold() for s in doc["segments"] for w in split_words(s, self.language)]
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
        from ..pii import PLACEHOLDER
        from ..stages.script import char_script
        for seg in doc["segments"]:
            if "<" in seg:
                seg = PLACEHOLDER.sub(" ", seg)      # <PHONE> is the pipeline's, not the text's
            for i, ch in enumerate(seg):
                if ch.isspace():
                    continue
                key = (doc["source"], doc.get("dialect") or "unknown", char_script(ch), ch)
                self.chars[key] += 1
                if key not in self.examples:
                    self.examples[key] = _context(seg, i) if examples else "(restricted source)"

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
        fig, ax = plt.subplots(figsize=(6.5, 0.4 * len(rows) + 1.2))
        ax.barh([r[axis] for r in rows], [r["words"] for r in rows], color="#4477aa")
        ax.set_xlabel("words")
        ax.set_title(f"Words per {axis}")
        ax.invert_yaxis()
        out.append((f"Words per {axis}", _png(fig)))
    fig, ax = plt.subplots(figsize=(6.5, 4))
    for d, pts in sorted(acc.growth.items()):
        if pts:
            ax.plot([t for t, _ in pts], [v for _, v in pts], marker=".", label=d)
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


def _html_table(rows: list[dict]) -> str:
    if not rows:
        return "<p>none</p>"
    head = "".join(f"<th>{html.escape(str(k))}</th>" for k in rows[0])
    body = "".join("<tr>" + "".join(f"<td>{html.escape(str(v))}</td>" for v in r.values()) + "</tr>" for r in rows)
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def write_report(folder: Path, acc: Accumulator, params, recipe) -> dict:
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
    overlap = {a: {b: round(jaccard(vocab[a], vocab[b]), 4) for b in names} for a in names}
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
    plots = _plots(acc, overlap)
    parts = [f"<!doctype html><html lang='en'><head><meta charset='utf-8'><title>Balance: {html.escape(recipe.corpus.name)}</title>",
             "<style>body{font-family:sans-serif;max-width:960px;margin:2em auto;color:#222}table{border-collapse:collapse;margin:1em 0}"
             "td,th{border:1px solid #ccc;padding:3px 8px;text-align:right}th{background:#eee}td:first-child{text-align:left}"
             ".warn{background:#fff3cd;border:1px solid #e0c36b;padding:.5em 1em}img{max-width:100%}</style></head><body>",
             f"<h1>Balance of the corpus “{html.escape(recipe.corpus.name)}” ({html.escape(recipe.corpus.language)})</h1>"]
    if warnings:
        parts.append("<div class='warn'><strong>Warnings</strong><ul>" + "".join(f"<li>{html.escape(w)}</li>" for w in warnings) + "</ul></div>")
    parts.append("<h2>Diversity</h2>" + _html_table([{"over": a, **m} for a, m in measures.items()]))
    parts.append("<p>Entropy in bits over the share of words; effective number = 2<sup>H</sup>; "
                 "imbalance ratio = largest / smallest group.</p>")
    for a in AXES:
        parts.append(f"<h2>By {a}</h2>" + _html_table(tables[a]))
    parts.append("<h2>Heaps' law per dialect (V = K·T<sup>β</sup>)</h2>" + _html_table(heaps))
    parts.append("<h2>Out-of-vocabulary rate of each dialect against the others</h2>" + _html_table(oov))
    parts.append(f"<h2>Temperature sampling across dialects (α = {params.alpha})</h2>" + _html_table(sampling))
    for title, data in plots:
        parts.append(f"<h2>{html.escape(title)}</h2><img alt='{html.escape(title)}' src='data:image/png;base64,{data}'>")
    parts.append("</body></html>\n")
    atomic_write_text(folder / "balance.html", "\n".join(parts))
    return {"measures": measures, "tables": tables, "heaps": heaps, "oov": oov, "sampling": sampling, "warnings": warnings}
