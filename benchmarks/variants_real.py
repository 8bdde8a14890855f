"""Spelling-variant discovery on real vocabularies: stand-ins found, real words left alone.

For Czech, Polish and Turkish (marks and special letters) and German (two-letter stand-ins
ae, oe, ue, ss), a corpus of lines sampled from wordfreq's real word frequencies (its 5,000 most
frequent words), a fifth of the lines typed without the special letters (as on a keyboard that
lacks them).  A stand-in pair is (plain form, word) where the plain form is not itself one of the
words the lines are drawn from; a minimal pair is one where it is, and the language's Hunspell
dictionary (Debian's hunspell-cs, -pl, -tr, -de-de, read with spylls) has it as a word.  A
proposal is right when it maps a plain form to the most frequent word it stands in for.  Scored:
recall in the top 2,000 rows (or the top K when more than 2,000 pairs are present), precision in
the top K (K = stand-in pairs present), and the share of the minimal pairs present in the top K.

    python benchmarks/variants_real.py [cs pl tr de] [--wordlist]
"""
from __future__ import annotations

import random
import sys
import unicodedata

from corpuskit import discovery as D

DICTS = {"cs": "cs_CZ", "pl": "pl_PL", "tr": "tr_TR", "de": "de_DE"}
SPECIAL = {"ł": "l", "ı": "i", "ø": "o", "đ": "d", "ß": "ss"}
GERMAN = {"ä": "ae", "ö": "oe", "ü": "ue", "ß": "ss"}
VOCABULARY = 5000     # the most frequent words the lines are drawn from


def plain(word: str, lang: str) -> str:
    """The word as typed on a keyboard without the language's special letters."""
    if lang == "de":
        return "".join(GERMAN.get(c, c) for c in word)
    word = "".join(SPECIAL.get(c, c) for c in word)
    return "".join(c for c in unicodedata.normalize("NFD", word) if not unicodedata.combining(c))


def costs_for(lang: str) -> D.CostTable:
    if lang == "de":
        return D.CostTable([("ä", "ae", 0.2), ("ö", "oe", 0.2), ("ü", "ue", 0.2), ("ß", "ss", 0.2)])
    return D.CostTable([(a, b, 0.2) for a, b in SPECIAL.items() if a != "ß"])


def corpus(lang: str, lines: int = 30000, plain_share: float = 0.2, seed: int = 5):
    from wordfreq import top_n_list, word_frequency
    words = [w for w in top_n_list(lang, VOCABULARY) if w.isalpha()]
    weights = [word_frequency(w, lang) for w in words]
    rng = random.Random(seed)
    docs = []
    for i in range(lines):
        line = rng.choices(words, weights, k=8)
        if rng.random() < plain_share:
            line = [plain(w, lang) for w in line]
        docs.append({"id": f"l{i}", "source": "s", "dialect": None, "segments": [" ".join(line)]})
    return words, docs


def evaluate(lang: str, use_wordlist: bool = False, top: int = 2000) -> dict:
    from spylls.hunspell import Dictionary
    dictionary = Dictionary.from_files(f"/usr/share/hunspell/{DICTS[lang]}")
    words, docs = corpus(lang)
    stats, contexts = D.collect(docs, language=lang)
    in_dict = lambda w: dictionary.lookup(w) or dictionary.lookup(w.capitalize())  # noqa: E731
    stand_ins, minimal = {}, set()    # plain form -> the most frequent word it stands in for
    vocabulary = set(words)
    for w in sorted(vocabulary, key=lambda x: -stats[x].count if x in stats else 0):
        p = plain(w, lang)
        if p == w or w not in stats or p not in stats:
            continue
        if p not in vocabulary:        # the plain form exists only as words typed without their letters
            stand_ins.setdefault(p, w)
        elif in_dict(p):               # both are words the lines are drawn from, and the dictionary's
            minimal.add((p, w))
    wordlist = {w for w in stats if in_dict(w)} if use_wordlist else None
    candidates = D.propose(stats, contexts, costs_for(lang), "", top=max(top, 2 * len(stand_ins)), language=lang,
                           wordlist=wordlist)
    pairs = [(c.variant, c.canonical) for c in candidates]
    k = len(stand_ins)
    truth = set(stand_ins.items())
    recall = len(set(pairs[:max(top, k)]) & truth) / max(1, k)
    precision = len(set(pairs[:k]) & truth) / max(1, k)
    in_top_k = {tuple(sorted(p)) for p in pairs[:k]}
    minimal_top = sum(1 for p in minimal if tuple(sorted(p)) in in_top_k) / max(1, len(minimal))
    return {"language": lang, "wordlist": use_wordlist, "stand_in_pairs": len(stand_ins), "minimal_pairs": len(minimal),
            f"recall_top_{max(top, k)}": round(recall, 3), "precision_top_k": round(precision, 3),
            "minimal_pairs_in_top_k": round(minimal_top, 3)}


if __name__ == "__main__":
    langs = [a for a in sys.argv[1:] if not a.startswith("--")] or ["cs", "pl", "tr", "de"]
    for lang in langs:
        print(evaluate(lang, use_wordlist="--wordlist" in sys.argv))
