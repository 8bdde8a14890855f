"""Quality filters, personal-data scrubbing, batched MinHash signatures and leak-free splits."""
import itertools

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st

from corpuskit.api import load_corpus
from corpuskit.stages import split as split_stage
from corpuskit.stages.dedup import (UnionFind, batch_shingle_hashes, batch_signatures, clusters_from_pairs,
                                    permutations, shingle_hashes, signature)
from corpuskit.stages.qualityfilter import Params as FParams, apply as filter_apply, scrub, segment_problem

# -- each reason code on a constructed case ---------------------------------------------------

FILTER_CASES = [
    ("too-short", "ŋɔ bɛ"),
    ("too-long", "ŋɔbɛ " * 1100),
    ("repeated-characters", "kamaaaaaaaaaa nɔ sɛ"),
    ("too-many-digits", "ŋɔ 2025 12 31 1999 47"),
    ("too-many-punctuation", "ŋɔ!!! ?? ... ;; -- ,,"),
    ("too-many-symbols", "ŋɔ $$ ++ == ## %% ^^"),
    ("too-many-urls", "see https://example.org/a/very/long/path ŋɔ"),
    ("too-many-emoji", "ŋɔ 🙂🙂🙂🙂🙂👍👍👍"),
    ("wrong-script", "ключ к двери ŋɔ"),
]


@pytest.mark.parametrize("reason,text", FILTER_CASES)
def test_each_filter_reason(reason, text):
    problem = segment_problem(text, FParams(), "", "Latn")
    assert problem is not None and problem[0] == reason, problem


def test_clean_segment_passes_every_filter():
    assert segment_problem("Kamɛ ŋɔ́ sɛli tabu nɔ wɛ, ŋa mɔki.", FParams(), "", "Latn") is None


def test_repeated_lines_drop_the_document_with_a_ledger_row():
    doc = {"id": "s:1", "source": "s", "segments": ["ŋɔ bɛli kamɛ tabu"] * 4, "seg_index": [0, 1, 2, 3]}
    kept, rows = filter_apply([doc], FParams(), "Latn")
    assert kept == [] and [(r.reason, r.unit, r.segments) for r in rows] == [("repeated-lines", "document", 4)]


@pytest.mark.parametrize("text,expected", [
    ("call +99 412 555 0199 today", "call <PHONE> today"),
    ("call (020) 7946 0958 today", "call <PHONE> today"),
    ("tavi.moru+news@example.org wrote", "<EMAIL> wrote"),
    ("see https://social.example/profile/tavi77 now", "see <URL> now"),
    ("see https://example.org/stories?id=4411 now", "see <URL> now"),
])
def test_personal_data_is_replaced_by_typed_placeholders(text, expected):
    assert scrub(text)[0] == expected


def test_ordinary_numbers_and_urls_are_not_personal_data():
    for text in ("in 1998 there were 12 boats", "https://example.org/songs/river", "pages 4-5", "on 2025-01-02 we met"):
        assert scrub(text)[0] == text


def test_id_number_pattern_from_the_recipe():
    text, counts = scrub("card NV-2231-88 issued", [r"NV-\d{4}-\d{2}"])
    assert text == "card <ID> issued" and counts["id"] == 1


def test_drop_document_policy_removes_documents_with_personal_data():
    doc = {"id": "s:1", "source": "s", "segments": ["ŋɔ bɛli kamɛ tabu +99 412 555 0199"], "seg_index": [0]}
    kept, rows = filter_apply([doc], FParams(pii="drop-document"), "Latn")
    assert kept == [] and rows[-1].reason == "personal-data" and rows[-1].unit == "document"


# -- batched signatures are the per-document ones ---------------------------------------------

texts = st.lists(st.text(alphabet="abɛɔŋ kmt.\u0301", max_size=80), max_size=12)


@settings(max_examples=60, deadline=None)
@given(texts, st.integers(1, 6))
def test_batched_shingles_equal_per_text_shingles(batch, ngram):
    got = batch_shingle_hashes(batch, ngram)
    assert len(got) == len(batch)
    for text, hashes in zip(batch, got):
        assert np.array_equal(hashes, shingle_hashes(text, ngram))


@settings(max_examples=60, deadline=None)
@given(texts, st.integers(1, 64))
def test_batched_signatures_equal_per_document_signatures(batch, chunk):
    a, b = permutations(32)
    repeated = batch_shingle_hashes(batch, 3, distinct=False)
    sigs = batch_signatures(repeated, a, b, chunk_shingles=chunk)
    for text, row in zip(batch, sigs):
        assert np.array_equal(row, signature(shingle_hashes(text, 3), a, b))


# -- splits -------------------------------------------------------------------------------------

@settings(max_examples=80, deadline=None)
@given(st.integers(2, 40).flatmap(lambda n: st.tuples(
    st.just(n), st.lists(st.tuples(st.integers(0, n - 1), st.integers(0, n - 1)), max_size=30),
    st.lists(st.sampled_from(["hill", "river", "coast"]), min_size=n, max_size=n))), st.integers(0, 5))
def test_no_near_duplicate_pair_crosses_splits(case, seed):
    n, pairs, dialects = case
    pairs = [(min(i, j), max(i, j)) for i, j in pairs if i != j]
    clustered = clusters_from_pairs(n, pairs)
    seen = {i for c in clustered for i in c}
    clusters = clustered + [[i] for i in range(n) if i not in seen]
    assignment = split_stage.assign(clusters, dialects, {"train": 0.8, "dev": 0.1, "test": 0.1}, seed,
                                    [f"d{i}" for i in range(n)])
    assert sorted(assignment) == list(range(n))
    assert all(assignment[i] == assignment[j] for i, j in pairs)


def test_union_find_joins_chains():
    uf = UnionFind(5)
    uf.union(0, 1)
    uf.union(3, 4)
    uf.union(1, 4)
    assert len({uf.find(i) for i in range(5)}) == 2 and uf.find(2) == 2


def test_demo_splits_do_not_share_near_duplicates(demo_run):
    """Exact character 5-gram Jaccard over every pair of documents in different splits."""
    corpus = load_corpus(demo_run.out)
    shingles = [set(shingle_hashes(" ".join(s), 5).tolist()) for s in corpus.segments]
    splits = corpus.split.tolist()
    leak = 0.3 + 0.1  # the demo recipe's leak threshold, with a margin for MinHash estimation error
    crossing = [(i, j) for i, j in itertools.combinations(range(len(splits)), 2)
                if splits[i] != splits[j] and shingles[i] and shingles[j]
                and len(shingles[i] & shingles[j]) / len(shingles[i] | shingles[j]) >= leak]
    assert set(splits) == {"train", "dev", "test"} and not crossing


def test_sorting_and_datasketch_index_give_the_same_candidates(monkeypatch):
    from corpuskit.stages import dedup
    rng = np.random.default_rng(3)
    base = rng.integers(0, 2**32, (300, 128), dtype=np.uint64).astype(np.uint32)
    noisy = base[:120] ^ ((rng.random((120, 128)) < 0.3) * np.uint32(7)).astype(np.uint32)
    sigs = np.concatenate([base, noisy, np.repeat(base[:1], 80, axis=0)])   # and one bucket of 81 copies
    eligible = np.ones(len(sigs), bool)
    bands, rows = dedup.lsh_params(0.5, 128, 0.3)
    with_index = dedup.candidate_pairs(sigs, eligible, bands, rows)
    monkeypatch.setattr(dedup, "DATASKETCH_INDEX_LIMIT", 10)
    by_sorting = dedup.candidate_pairs(sigs, eligible, bands, rows)
    assert with_index == by_sorting and len(with_index) > 100
