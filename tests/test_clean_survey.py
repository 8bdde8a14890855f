"""The clean-up stage's per-source survey, split over partitions as the runner splits it.

The survey counts lines and message texts as 64-bit digests; these tests check that what it
finds equals a direct count over the same documents, whatever the partitioning, and that
the memory-saving choices (only forwarded messages' originals are kept) change no decision.
"""
from collections import Counter

from hypothesis import given, settings, strategies as st

from corpuskit.records import new_document
from corpuskit.stages import clean

PARAMS = clean.Params()
FOOTER = "Kema tabu sɛli, ŋa bé wɔ dená."
WORDS = "abcdefghijklmnopqrstuvwxyz"


def web_page(i: int, lines: list[str]) -> dict:
    return new_document(id=f"web:{i}", source="web", medium="web", segments=lines)


def message(i: int, text: str) -> dict:
    return new_document(id=f"msg:{i:03d}", source="msg", medium="typed-message", segments=[text])


def survey_of(docs: list[dict], cuts: list[int]) -> dict:
    parts, start = [], 0
    for cut in sorted(set(c % (len(docs) + 1) for c in cuts)) + [len(docs)]:
        parts.append(docs[start:cut])
        start = cut
    return clean.merge_surveys([clean.survey_partition(p, PARAMS) for p in parts if p], PARAMS)


def removed(docs: list[dict], survey: dict) -> dict[str, str]:
    _, rows, _ = clean.apply([dict(d, segments=list(d["segments"])) for d in docs], PARAMS,
                          clean.partition_context(None, survey))
    return {f"{r.doc_id}:{r.seg_index}": r.reason for r in rows if r.action == "removed"}


@settings(max_examples=30, deadline=None)
@given(st.lists(st.integers(0, 40), max_size=4))
def test_web_boilerplate_is_what_repeats_on_enough_pages(cuts):
    pages = [web_page(i, [f"Bɛ wɔ {WORDS[i]} lɔ́.", FOOTER if i % 3 else f"Yɔgí {WORDS[i]} sekɛ."]) for i in range(20)]
    survey = survey_of(pages, cuts)
    # Direct count: a line on at least max(3, 0.2 x pages) pages is boilerplate (the stage's rule).
    on_pages = Counter(line for p in pages for line in set(p["segments"]))
    expected = {line for line, n in on_pages.items() if n >= max(3, 0.2 * len(pages))}
    assert expected == {FOOTER}
    assert len(survey["boilerplate"]) == 1
    reasons = removed(pages, survey)
    assert sorted(reasons) == sorted(f"web:{i}:1" for i in range(20) if i % 3)
    assert set(reasons.values()) == {"web-boilerplate"}


@settings(max_examples=30, deadline=None)
@given(st.lists(st.integers(0, 12), max_size=3))
def test_a_forwarded_copy_points_to_the_first_message_in_any_partitioning(cuts):
    texts = ["Kema tabu sɛli.", "Fwd: Kema tabu sɛli.", "Bɛ wɔ lɔ́.", ">> Yɔgí bé.", "Yɔgí  bé.",
             "Fwd: Dená sekɛ.", "Fwd: Dená sekɛ.", "Mɛkɔ wasi."]
    docs = [message(i, t) for i, t in enumerate(texts)]
    survey = survey_of(docs, cuts)
    # Only texts that some forwarded message has are kept: three here.
    assert len(survey["first"]) == 3
    _, rows, _ = clean.apply([dict(d, segments=list(d["segments"])) for d in docs], PARAMS,
                          clean.partition_context(None, survey))
    copies = {r.doc_id: r.dup_of for r in rows if r.reason == "forwarded-copy"}
    # msg 1 repeats msg 0; msg 3 is forwarded before the plain msg 4 (kept, first of its text);
    # msg 6 repeats the forwarded msg 5.
    assert copies == {"msg:001": "msg:000", "msg:006": "msg:005"}
