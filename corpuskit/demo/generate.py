"""Generate the demo sources and their ground truth, deterministically from a seed.

Everything here is invented: the language Narevi (local-use code ``qnv``),
its dialects hill, river and coast, the villages Ambovel, Sirrak and Doloma,
the contact language Tamsic (``qtm``), the sources and the pseudonymous
contributors.  English sentences appear as the third-language noise.

    python -m corpuskit.demo.generate --out sample_texts [--seed 7] [--mb N]
"""
from __future__ import annotations

import argparse
import csv
import io
import json
import math
import random
import unicodedata
from collections import defaultdict
from pathlib import Path

LANG, CONTACT = "qnv", "qtm"
DIALECTS = ("hill", "river", "coast")
CONS = list("mnkltsbdgwy") + ["ŋ"]
VOWELS = ["a", "e", "i", "o", "u", "ɛ", "ɔ"]
TONES = {"a": "á", "e": "é", "i": "í", "o": "ó", "u": "ú", "ɛ": "ɛ́", "ɔ": "ɔ́"}
ASCII_STANDIN = {"ŋ": "ng", "ɛ": "e", "ɔ": "o"}
CYRILLIC = {"a": "а", "e": "е", "ɛ": "э", "i": "и", "o": "о", "ɔ": "ө", "u": "у", "ŋ": "ң", "m": "м", "n": "н",
            "k": "к", "l": "л", "t": "т", "s": "с", "b": "б", "d": "д", "g": "г", "w": "в", "y": "й", "h": "һ"}
CONFUSABLE = {"a": "\u0430", "o": "\u043e", "e": "\u0435", "y": "\u0443", "k": "\u043a"}
CONTACT_SYLL = ["pra", "zen", "fir", "xo", "jul", "rax", "hev", "qua", "tri", "vos", "zem", "fal", "por", "jix", "rhu", "cle"]
ENGLISH = ["the weather is fine today and the market opens early",
           "please remember to bring the forms to the office on monday",
           "our team will publish the next report after the holidays",
           "click here to read more about the project and its partners",
           "the bus to the city leaves every two hours from the square",
           "thank you for your support during the rainy season",
           "this page uses cookies to improve your experience",
           "new books arrived at the library last week"]
# Bytes of source text per unit of scale (seeds and ground truth aside), measured on seed 7
# at scale 228 (15.2 MB).
BYTES_PER_SCALE = 66_700
PEOPLE = ["Tavi", "Moru", "Selka", "Bendo", "Irra", "Kelo", "Yamun", "Doru", "Lisse", "Amak"]


class Lexicon:
    def __init__(self, rng: random.Random, size: int = 420):
        self.rng = rng
        words, shapes = set(), set()
        while len(words) < size:
            n = rng.choice([1, 2, 2, 2, 3, 3])
            w = "".join(rng.choice(CONS) + rng.choice(VOWELS) for _ in range(n))
            if rng.random() < 0.3:
                i = max(i for i, c in enumerate(w) if c in VOWELS)
                w = w[:i] + TONES[w[i]] + w[i + 1:]
            # Keep the invented lexicon free of accidental near-homographs (words equal once tone
            # and the ɛ/e, ɔ/o, ŋ/ng distinctions are dropped), so that a planted variant is
            # the only thing that makes two written forms collide.
            if ascii_variant(w) not in shapes:
                shapes.add(ascii_variant(w))
                words.add(w)
        self.base = sorted(words)
        rng.shuffle(self.base)
        # Each dialect has its own words for part of the lexicon and sound changes.
        self.coast_words = {w: self._coin() for w in self.base[::7]}
        self.weights = [1 / (r + 1) for r in range(len(self.base))]

    def _coin(self) -> str:
        return "".join(self.rng.choice(CONS) + self.rng.choice(VOWELS) for _ in range(2))

    def dialect_word(self, w: str, dialect: str) -> str:
        if dialect == "river":
            w = w.replace("ɔ", "o") if w.startswith(("s", "k", "m")) else w
            return ("h" + w[1:]) if w.startswith("s") else w
        if dialect == "coast":
            return self.coast_words.get(w, w)
        return w

    def sentence(self, rng: random.Random, dialect: str, n: tuple[int, int] = (5, 12)) -> str:
        k = rng.randint(*n)
        words = [self.dialect_word(w, dialect) for w in rng.choices(self.base, self.weights, k=k)]
        s = " ".join(words)
        return s[0].upper() + s[1:] + rng.choice([".", ".", ".", "?"])


def contact_sentence(rng: random.Random, n=(5, 10)) -> str:
    words = ["".join(rng.choice(CONTACT_SYLL) for _ in range(rng.randint(1, 3))) for _ in range(rng.randint(*n))]
    s = " ".join(words)
    return s[0].upper() + s[1:] + "."


def nfc(s: str) -> str:
    return unicodedata.normalize("NFC", s)


def ascii_variant(word: str) -> str:
    w = unicodedata.normalize("NFD", word)
    w = "".join(c for c in w if not unicodedata.combining(c))
    for k, v in ASCII_STANDIN.items():
        w = w.replace(k, v)
    return w


def to_cyrillic(text: str) -> str:
    out = []
    for ch in unicodedata.normalize("NFD", text):
        low = ch.lower()
        c = CYRILLIC.get(low, ch)
        out.append(c.upper() if ch.isupper() else c)
    return unicodedata.normalize("NFC", "".join(out))


class Truth:
    def __init__(self):
        self.data = defaultdict(list)

    def add(self, what: str, **item):
        self.data[what].append(item)


def _w(path: Path, text: str, encoding: str = "utf-8") -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_bytes(text.encode(encoding))


def vtt_time(t: float) -> str:
    h, rem = divmod(t, 3600)
    m, s = divmod(rem, 60)
    return f"{int(h):02d}:{int(m):02d}:{s:06.3f}"


def transcripts(out: Path, lex: Lexicon, rng: random.Random, truth: Truth, n_files: int) -> None:
    for f in range(n_files):
        fmt = "vtt" if f % 2 == 0 else "srt"
        dialect = "hill" if fmt == "vtt" else "river"  # the two broadcasters, one per dialect
        speakers = rng.sample(PEOPLE, 2)
        cues, t = [], 1.0
        for c in range(rng.randint(12, 20)):
            spk = speakers[c % 2]
            if rng.random() < 0.1:
                cues.append((t, t + 2, spk, rng.choice(["[music]", "(laughs)", "[inaudible]"])))
                t += 2.5
                continue
            sent = lex.sentence(rng, dialect)
            if rng.random() < 0.15:
                sent = contact_sentence(rng)
                truth.add("contact_segment", source=f"radio-{fmt}", text=sent)
            words = sent.split()
            if len(words) > 7 and rng.random() < 0.4:
                cut = len(words) // 2
                cues.append((t, t + 2, spk, " ".join(words[:cut])))
                cues.append((t + 2.2, t + 4, spk, " ".join(words[cut:])))
                truth.add("cue_join", text=" ".join(words[cut:]))
                t += 4.5
            else:
                if rng.random() < 0.1:
                    sent = sent[:-1] + " (laughs)" + sent[-1]
                cues.append((t, t + 3, spk, sent))
                t += 3.5
        name = f"broadcast-{f + 1:02d}"
        if fmt == "vtt":
            lines = ["WEBVTT", "", "NOTE recorded at Sirrak community hall", ""]
            for i, (a, b, spk, text) in enumerate(cues, 1):
                lines += [str(i), f"{vtt_time(a)} --> {vtt_time(b)}", f"<v {spk}>{text}" if not text.startswith(("[", "(")) else text, ""]
            _w(out / "transcripts" / dialect / f"{name}.vtt", "\n".join(lines))
        else:
            lines = []
            for i, (a, b, spk, text) in enumerate(cues, 1):
                lines += [str(i), f"{vtt_time(a).replace('.', ',')} --> {vtt_time(b).replace('.', ',')}",
                          f"{spk.upper()}: {text}" if not text.startswith(("[", "(")) else text, ""]
            _w(out / "transcripts" / dialect / f"{name}.srt", "\n".join(lines))


def booklets(out: Path, lex: Lexicon, rng: random.Random, truth: Truth, n_books: int) -> list[list[str]]:
    """OCR'd booklets: headers, footers, page numbers, hyphenation; two are reprints of others."""
    texts = []
    for b in range(n_books):
        reprint_of = b - 2 if b >= 2 and b % 4 == 2 else None
        paras = texts[reprint_of] if reprint_of is not None else [lex.sentence(rng, "hill", (8, 16)) + " " + lex.sentence(rng, "hill", (8, 16)) for _ in range(10)]
        texts.append(paras)
        title = f"NAREVI STORIES BOOK {b + 1}"
        folder = out / "booklets" / f"book-{b + 1:02d}"
        page, pages, line_w = [], [], 48
        for para in paras:
            words = para.split()
            line = ""
            for w in words:
                if len(line) + len(w) + 1 > line_w:
                    if len(w) > 5 and rng.random() < 0.5:
                        cut = len(w) // 2
                        page.append((line + " " + w[:cut] + "-").strip())
                        truth.add("hyphenation", booklet=f"book-{b + 1:02d}", page=len(pages) + 1, word=w)
                        line = w[cut:]
                        continue
                    page.append(line)
                    line = w
                else:
                    line = (line + " " + w).strip()
            page.append(line)
            if len(page) > 12:
                pages.append(page)
                page = []
        if page:
            pages.append(page)
        for p, body in enumerate(pages, 1):
            footer = "Printed by the Ambovel reading circle"
            lines = [title] + body + [footer, f"- {p} -"]
            truth.add("page_furniture", booklet=f"book-{b + 1:02d}", page=p, header=title, footer=footer, number=f"- {p} -")
            if rng.random() < 0.3:  # an OCR confusion
                i = rng.randrange(1, len(lines) - 2)
                word = next((w for w in lines[i].split() if "m" in w), None)
                if word:
                    core = word.strip(".?-")
                    truth.add("ocr_confusion", booklet=f"book-{b + 1:02d}", page=p,
                              error=core.replace("m", "rn", 1).lower(), word=core.lower())
                lines[i] = lines[i].replace("m", "rn", 1)
            _w(folder / f"page-{p:03d}.txt", "\n".join(lines) + "\n")
        if reprint_of is not None:
            truth.add("near_duplicate", kind="reprint", doc=f"booklets:booklets/book-{b + 1:02d}",
                      of=f"booklets:booklets/book-{reprint_of + 1:02d}")
    return texts


def messages(out: Path, lex: Lexicon, rng: random.Random, truth: Truth, n: int) -> None:
    lines, sent_texts = [], []
    for i in range(n):
        ts = f"2025-{1 + i // 60:02d}-{1 + (i % 28):02d} {8 + i % 12:02d}:{(i * 7) % 60:02d}"
        who = rng.choice(PEOPLE)
        r = rng.random()
        if r < 0.05:
            lines.append(f"[{ts}] {who}: {who} joined")
            truth.add("system_line", text=f"{who} joined")
            continue
        if r < 0.15 and sent_texts:
            original = rng.choice(sent_texts)
            lines.append(f"[{ts}] {who}: Fwd: {original}")
            truth.add("forwarded_copy", text=original)
            continue
        dialect = rng.choice(["river", "river", "hill"])
        text = lex.sentence(rng, dialect, (4, 10))
        if rng.random() < 0.2:
            words = text.split()
            i_w = rng.randrange(len(words))
            core = words[i_w].rstrip(".?")
            if core.isalpha() and ascii_variant(core) != core:
                truth.add("variant", variant=ascii_variant(core).lower(), canonical=core.lower())
                words[i_w] = ascii_variant(core) + words[i_w][len(core):]
            text = " ".join(words)
        if rng.random() < 0.3:
            text = plant_confusable(text, rng, truth)
        if rng.random() < 0.15:
            text += " " + contact_sentence(rng, (2, 4))[:-1].lower()
            truth.add("code_switch", text=text)
        if rng.random() < 0.08:
            phone = f"+99 {rng.randint(100, 999)} {rng.randint(100, 999)} {rng.randint(1000, 9999)}"
            text += f" {phone}"
            truth.add("pii", kind="phone", text=phone)
        if rng.random() < 0.1:
            text += " " + rng.choice(["🙂", "👍", "🙏🏽"])
        if rng.random() < 0.06:
            text = contact_sentence(rng)
            truth.add("contact_segment", source="group-chat", text=text)
        sent_texts.append(text)
        lines.append(f"[{ts}] {who}: {text}")
    _w(out / "messages" / "river-group.txt", "\n".join(lines) + "\n")


def plant_confusable(text: str, rng: random.Random, truth: Truth, swap: dict[str, str] = CONFUSABLE) -> str:
    """Type one look-alike letter of the other script inside a word, as a second keyboard does."""
    words = text.split()
    i_w = rng.randrange(len(words))
    w = words[i_w]
    spots = [i for i, ch in enumerate(w) if ch in swap]
    if len(w) < 3 or not w.isalpha() or not spots:
        return text
    i = rng.choice(spots)
    words[i_w] = w[:i] + swap[w[i]] + w[i + 1:]
    truth.add("mixed_script", token=words[i_w], fixed=w)
    return " ".join(words)


def sheet(out: Path, lex: Lexicon, rng: random.Random, truth: Truth, n: int) -> None:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["row_id", "sentence", "dialect", "contributor", "submitted"])
    rows = []
    for i in range(n):
        d = DIALECTS[i % 3]
        text = lex.sentence(rng, d, (8, 14))
        if rng.random() < 0.15 and rows:
            orig = rng.choice(rows)
            words = orig[1].split()
            if len(words) > 8:
                words[rng.randrange(len(words))] = rng.choice(lex.base)
            text = " ".join(words)
            truth.add("near_duplicate", kind="resubmission", doc=f"sentence-sheet:sheet/sentences.csv:r{i + 1}",
                      of=f"sentence-sheet:sheet/sentences.csv:{orig[0]}")
            d = orig[2]
        if rng.random() < 0.1:
            text = plant_confusable(text, rng, truth)
        if rng.random() < 0.05:
            email = f"{rng.choice(PEOPLE).lower()}{rng.randint(1, 99)}@example.org"
            text += f" {email}"
            truth.add("pii", kind="email", text=email)
        rows.append((f"r{i + 1}", text, d, f"contributor-{rng.randint(1, 12):02d}", f"2025-0{1 + i % 9}-15"))
    for r in rows:
        w.writerow(r)
    _w(out / "sheet" / "sentences.csv", buf.getvalue())


def web(out: Path, lex: Lexicon, rng: random.Random, truth: Truth, n: int) -> None:
    nav = "Home | News | Stories | Songs | Contact"
    foot = "© 2025 Doloma valley radio. All rights reserved."
    for i in range(n):
        body = [lex.sentence(rng, "coast", (8, 14)) for _ in range(rng.randint(4, 8))]
        if rng.random() < 0.3:
            noise = ENGLISH[rng.randrange(len(ENGLISH))].capitalize() + "."
            body.insert(rng.randrange(len(body)), noise)
            truth.add("noise_segment", text=noise)
        lines = [nav, f"Story {i + 1}"] + body + ["Share this page", foot]
        truth.add("web_boilerplate", page=i + 1, lines=[nav, "Share this page", foot])
        _w(out / "web" / f"page-{i + 1:03d}.txt", "\n".join(lines) + "\n")


def cyrillic_booklet(out: Path, lex: Lexicon, rng: random.Random, truth: Truth, n: int) -> None:
    lines = []
    for i in range(n):
        s = lex.sentence(rng, "river", (6, 12))
        cyr = to_cyrillic(s)
        truth.add("cyrillic_line", latin=nfc(s), cyrillic=cyr)
        if rng.random() < 0.25:  # a Latin look-alike typed inside a Cyrillic word
            cyr = plant_confusable(cyr, rng, truth, {v: k for k, v in CONFUSABLE.items()})
        lines.append(cyr)
    _w(out / "cyrillic" / "river-hymns.txt", "\n\n".join(lines) + "\n")


def seeds(out: Path, lex: Lexicon, rng: random.Random, n: int) -> None:
    for d in DIALECTS:
        _w(out / "seeds" / f"{LANG}-{d}.txt", "\n".join(lex.sentence(rng, d, (2, 10)) for _ in range(n)) + "\n")
    _w(out / "seeds" / f"{CONTACT}.txt", "\n".join(contact_sentence(rng, (2, 8)) for _ in range(n)) + "\n")
    other = [rng.choice(ENGLISH) for _ in range(n // 2)] + \
            [" ".join(rng.choice(ENGLISH).split()[:rng.randint(2, 6)]) for _ in range(n // 2)]
    _w(out / "seeds" / "other.txt", "\n".join(other) + "\n")


def generate(out: Path, seed: int = 7, scale: int = 1) -> dict:
    rng = random.Random(seed)
    lex = Lexicon(rng)
    truth = Truth()
    transcripts(out, lex, rng, truth, 6 * scale)
    booklets(out, lex, rng, truth, 6 * scale)
    messages(out, lex, rng, truth, 220 * scale)
    sheet(out, lex, rng, truth, 150 * scale)
    web(out, lex, rng, truth, 20 * scale)
    cyrillic_booklet(out, lex, rng, truth, 40 * scale)
    seeds(out, lex, rng, 300)
    data = {k: v for k, v in sorted(truth.data.items())}
    _w(out / "ground-truth.json", json.dumps(data, ensure_ascii=False, indent=1, sort_keys=True) + "\n")
    return data


def scale_for_mb(mb: float) -> int:
    """The scale whose source text (seeds and ground truth aside) comes to about `mb` mebibytes."""
    return max(1, math.ceil(mb * 2**20 / BYTES_PER_SCALE))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", type=Path, default=Path("sample_texts"))
    ap.add_argument("--seed", type=int, default=7)
    size = ap.add_mutually_exclusive_group()
    size.add_argument("--scale", type=int, default=1, help="multiply the number of documents")
    size.add_argument("--mb", type=float, help="generate about this many MiB of source text")
    args = ap.parse_args()
    generate(args.out, args.seed, scale_for_mb(args.mb) if args.mb else args.scale)


if __name__ == "__main__":
    main()
