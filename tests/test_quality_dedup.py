"""Quality filters, personal-data scrubbing, batched MinHash signatures and leak-free splits."""
import itertools

import numpy as np
import pytest
from hypothesis import example, given, settings, strategies as st

from corpuskit import minhash
from corpuskit import lsh
from corpuskit.api import load_corpus
from corpuskit.stages import split as split_stage
from corpuskit.stages.dedup import clusters_from_pairs
from corpuskit.minhash import batch_shingle_hashes, batch_signatures, permutations, shingle_hashes, signature
from corpuskit.pii import scrub
from corpuskit.stages.qualityfilter import Params as FParams, apply as filter_apply, segment_problem, segment_problems

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


def _problem_by_patterns(text, params, target):
    """The filters written one segment at a time with the regex module's Unicode properties (the
    reference the column-wise count in segment_problems must agree with)."""
    import regex
    bare = regex.sub(r"<(?:PHONE|EMAIL|URL|ID)>", "", text)
    n = len(bare)
    if not bare.strip():
        return "no-text", "nothing left but placeholders or spaces"
    if n < params.min_chars:
        return "too-short", f"{n} characters < {params.min_chars}"
    if n > params.max_chars:
        return "too-long", f"{n} characters > {params.max_chars}"
    m = regex.search(r"(.)\1{%d,}" % params.max_char_repeat, bare)
    if m:
        return "repeated-characters", f"'{m.group(1)}' repeated {len(m.group())} times"
    for name, pattern, limit in (("digits", r"\p{Nd}", params.max_digit_share), ("punctuation", r"\p{P}", params.max_punct_share),
                                 ("symbols", r"[\p{S}--\p{Extended_Pictographic}]", params.max_symbol_share),
                                 ("urls", r"https?://\S+|www\.\S+", params.max_url_share),
                                 ("emoji", r"[\p{Extended_Pictographic}\p{Emoji_Modifier}]", params.max_emoji_share)):
        share = sum(map(len, regex.findall(pattern, bare, flags=regex.V1))) / n
        if share > limit:
            return f"too-many-{name}", f"{share:.2f} > {limit}"
    letters = regex.findall(r"\p{L}", bare)
    in_script = len(regex.findall(r"\p{scx=Latin}", "".join(letters)))
    if letters and in_script / len(letters) < params.min_script_share:
        return "wrong-script", f"{in_script / len(letters):.2f} of letters in {target} < {params.min_script_share}"
    return None


# Pieces that trip each filter, mixed with any Unicode text (lone surrogates included: the
# column-wise count must read them as code points, as the patterns do).
_FILTER_PIECES = st.sampled_from(["aaaaaaaa", "\n\n\n\n\n\n\n\n", "1234", "!?", "$+", "🙂👍🏽", "https://x.example/p",
                                  "www.x.example", "<PHONE>", "<EMAIL> ", "ключ", "ŋɔ́ sɛ", "  ", "\u0301\u0301"])
_FILTER_TEXTS = st.lists(st.one_of(_FILTER_PIECES, st.text(max_size=12)), max_size=6).map("".join)


@settings(max_examples=300, deadline=None)
@given(st.lists(_FILTER_TEXTS, min_size=1, max_size=8), st.integers(2, 8))
@example(["kamɛ ŋɔ aaaa", "aaaa sɛli tabu", "", "aaaaa"], 6)   # a run across two segments is no run
def test_column_wise_filters_agree_with_the_patterns_one_segment_at_a_time(texts, repeat):
    # Reference: the regex module's Unicode property classes, one segment at a time.
    params = FParams(max_char_repeat=repeat)
    assert segment_problems(texts, params, "Latn") == [_problem_by_patterns(t, params, "Latn") for t in texts]


def test_repeated_lines_drop_the_document_with_a_ledger_row():
    doc = {"id": "s:1", "source": "s", "segments": ["ŋɔ bɛli kamɛ tabu"] * 4, "seg_index": [0, 1, 2, 3]}
    kept, rows, _ = filter_apply([doc], FParams(), {"target_script": "Latn", "regions": []})
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
    kept, rows, _ = filter_apply([doc], FParams(pii="drop-document"), {"target_script": "Latn", "regions": []})
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
    st.just(n), st.lists(st.tuples(st.integers(0, n - 1), st.integers(0, n - 1)), max_size=30))), st.integers(0, 5))
def test_no_near_duplicate_pair_crosses_splits(case, seed):
    n, pairs = case
    pairs = [(min(i, j), max(i, j)) for i, j in pairs if i != j]
    clustered = clusters_from_pairs(n, pairs)
    seen = {i for c in clustered for i in c}
    clusters = clustered + [[i] for i in range(n) if i not in seen]
    assignment = split_stage.assign(clusters, [f"d{i}" for i in range(n)], {"train": 0.8, "dev": 0.1, "test": 0.1}, seed)
    assert sorted(assignment) == list(range(n))
    assert all(assignment[i] == assignment[j] for i, j in pairs)


@settings(max_examples=60, deadline=None)
@given(st.sets(st.text("abcdefgh:0123456789", min_size=1, max_size=12), min_size=1, max_size=60),
       st.sets(st.text("ijklmnop:0123456789", min_size=1, max_size=12), max_size=60), st.integers(0, 3))
def test_adding_documents_never_moves_an_assigned_one(old, new, seed):
    """Stability across corpus releases: a document that was in test stays in test."""
    ratios = {"train": 0.8, "dev": 0.1, "test": 0.1}
    names = sorted(old)
    before = split_stage.assign([[i] for i in range(len(names))], names, ratios, seed)
    grown = names + sorted(new - old)
    after = split_stage.assign([[i] for i in range(len(grown))], grown, ratios, seed)
    assert all(after[i] == before[i] for i in range(len(names)))


def test_split_shares_follow_the_ratios():
    """Hash placement: with 20,000 singleton clusters each share is within 4 binomial
    standard errors of its ratio (0.8 / 0.1 / 0.1)."""
    n = 20_000
    assignment = split_stage.assign([[i] for i in range(n)], [f"src:{i}" for i in range(n)],
                                    {"train": 0.8, "dev": 0.1, "test": 0.1}, 0)
    counts = {s: sum(1 for v in assignment.values() if v == s) for s in ("train", "dev", "test")}
    for split, ratio in (("train", 0.8), ("dev", 0.1), ("test", 0.1)):
        assert abs(counts[split] / n - ratio) <= 4 * (ratio * (1 - ratio) / n) ** 0.5


def test_zero_ratio_split_gets_nothing():
    assignment = split_stage.assign([[i] for i in range(500)], [f"d{i}" for i in range(500)],
                                    {"train": 0.9, "dev": 0.0, "test": 0.1}, 1)
    assert set(assignment.values()) == {"train", "test"}


def test_clusters_are_connected_components():
    # chains and a lone pair; documents in no pair are left out
    assert clusters_from_pairs(9, [(0, 1), (3, 4), (1, 4), (6, 8)]) == [[0, 1, 3, 4], [6, 8]]
    assert clusters_from_pairs(5, []) == []


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


def _datasketch_candidates(sigs, bands, rows):
    """Reference: the pairs sharing a bucket in datasketch's own MinHashLSH index, built from the
    same hash values (LeanMinHash, scheme affine32) with the same bands and rows."""
    from datasketch import LeanMinHash, MinHashLSH
    index = MinHashLSH(num_perm=sigs.shape[1], params=(bands, rows))
    with index.insertion_session() as session:
        for i, sig in enumerate(sigs):
            session.insert(i, LeanMinHash(seed=minhash.SCHEME_SEED, hashvalues=sig, scheme="affine32"), check_duplication=False)
    pairs = set()
    for table in index.hashtables:
        for key in table.keys():
            members = sorted(table.get(key))
            if len(members) > lsh.FULL_BUCKET:   # large buckets link each member to the first only
                pairs.update((members[0], m) for m in members[1:])
            else:
                pairs.update((a, b) for x, a in enumerate(members) for b in members[x + 1:])
    return np.array(sorted(pairs), dtype=np.int64).reshape(-1, 2)


def test_sorted_band_keys_give_the_candidates_of_datasketchs_index(monkeypatch):
    from corpuskit.stages import dedup
    rng = np.random.default_rng(3)
    base = rng.integers(0, 2**32, (300, 128), dtype=np.uint64).astype(np.uint32)
    noisy = base[:120] ^ ((rng.random((120, 128)) < 0.3) * np.uint32(7)).astype(np.uint32)
    sigs = np.concatenate([base, noisy, np.repeat(base[:1], 80, axis=0)])   # and one bucket of 81 copies
    eligible = np.ones(len(sigs), bool)
    bands, rows = lsh.lsh_params(0.5, 128)
    with_index = _datasketch_candidates(sigs, bands, rows)
    by_sorting = dedup.candidate_pairs(sigs, eligible, bands, rows)
    assert np.array_equal(with_index, by_sorting) and len(with_index) > 100
    # The cluster engine's path: band keys shuffled so that equal keys meet in one partition.
    class TwoPartitions:
        def frame_map(self, rows, key, func, meta):
            import pandas as pd
            return pd.concat([func(part) for _, part in rows.groupby(rows[key] % 2)])
    assert np.array_equal(dedup.candidate_pairs(sigs, eligible, bands, rows, TwoPartitions()), by_sorting)
    # Verifying band by band (large sets; here made to apply to this small one) keeps exactly the
    # verified candidates of the whole set, each once, though a near copy shares many bands.
    data = dedup.SignatureSet.from_arrays(sigs)
    params = dedup.Params(threshold=0.5)
    whole = dedup.verify_pairs(data, with_index, 0.5)
    assert list(dedup.near_duplicate_pairs(data, 0.5, params)[0]) == list(zip(*(c.tolist() for c in whole)))
    checked = []
    monkeypatch.setattr(dedup, "BANDWISE_ABOVE", 0)
    banded, _ = dedup.near_duplicate_pairs(data, 0.5, params,
                                           verify=lambda d, p, t: checked.append(len(p)) or dedup.verify_pairs(d, p, t))
    assert len(checked) == bands and sum(checked) < len(with_index) * 2
    assert len(whole[0]) > 100 and list(banded) == list(zip(*(c.tolist() for c in whole)))


def _signature_files(tmp_path, sizes, num_perm=32, seed=5):
    """Partition files as signatures_task writes them, from random signatures and segment hashes."""
    rng = np.random.default_rng(seed)
    sig_files, fact_files, all_sigs, facts = [], [], [], []
    for p, n in enumerate(sizes):
        sigs = rng.integers(0, 2**32, (n, num_perm), dtype=np.uint64).astype(np.uint32)
        segs = rng.integers(1, 4, n)
        seg_hashes = rng.integers(0, 6, int(segs.sum()))          # few values: many repeats
        sources = np.array([f"s{(p + i) % 3}" for i in range(n)])
        np.save(tmp_path / f"p{p}.npy", sigs)
        np.savez(tmp_path / f"p{p}.npz", ids=np.array([f"s:{p}:{i}" for i in range(n)]), n_shingles=np.full(n, 9),
                 exact=rng.integers(0, 2**63, n, dtype=np.uint64), lengths=rng.integers(1, 99, n), sources=sources,
                 seg_hashes=seg_hashes,
                 seg_offsets=np.concatenate([[0], np.cumsum(segs)]))
        sig_files.append(tmp_path / f"p{p}.npy")
        fact_files.append(tmp_path / f"p{p}.npz")
        all_sigs.append(sigs)
        facts.extend((f"s:{p}:{i}", sources[i], seg_hashes[sum(segs[:i]):sum(segs[:i + 1])].tolist()) for i in range(n))
    return sig_files, fact_files, np.concatenate(all_sigs), facts


@pytest.mark.parametrize("threshold", [0.3, 0.5, 0.52, 0.7])
def test_verifying_on_the_lowest_bytes_first_keeps_every_pair_the_full_comparison_keeps(threshold):
    """Pairs whose values agree often in the lowest byte but differ above it are the hard case
    for the byte-wise first pass: the result must equal comparing the whole values."""
    from corpuskit.stages import dedup
    rng = np.random.default_rng(11)
    base = rng.integers(0, 2**32, (400, 128), dtype=np.uint64).astype(np.uint32)
    twin = base.copy()
    same = rng.random(base.shape) < rng.random((400, 1))                   # share of equal values per row
    low_only = ~same & (rng.random(base.shape) < rng.random((400, 1)) ** 3)  # equal lowest byte only
    twin[~same] = rng.integers(0, 2**32, int((~same).sum()), dtype=np.uint64).astype(np.uint32)
    twin[low_only] = (twin[low_only] & np.uint32(0xFFFFFF00)) | (base[low_only] & np.uint32(0xFF))
    twin[low_only] ^= np.uint32(0x100) * (twin[low_only] == base[low_only])  # and really differ
    sigs = np.concatenate([base, twin])
    pairs = np.stack([np.arange(400), np.arange(400) + 400], axis=1).astype(np.int64)
    pairs = np.concatenate([pairs, rng.integers(0, 800, (5000, 2))])
    estimates = (sigs[pairs[:, 0]] == sigs[pairs[:, 1]]).mean(axis=1)
    left, right, est = dedup.verify_pairs(dedup.SignatureSet.from_arrays(sigs), pairs, threshold)
    keep = estimates >= threshold
    assert 20 < keep.sum() < 400
    close = (estimates >= threshold) & (estimates < threshold + 0.02)     # just at the threshold
    assert close.sum() >= 3, close.sum()
    assert np.array_equal(left, pairs[keep, 0]) and np.array_equal(right, pairs[keep, 1])
    assert np.array_equal(est, estimates[keep])


def test_signature_set_reads_partition_files_like_one_array(tmp_path):
    from corpuskit.stages import dedup
    sig_files, fact_files, sigs, facts = _signature_files(tmp_path, [7, 0, 12, 5])
    data = dedup.SignatureSet(32, sig_files, fact_files, ["a", "b", "c", "d"])
    rows = np.array([23, 0, 8, 8, 19, 6])
    assert len(data) == 24 and np.array_equal(data.take(rows), sigs[rows])
    data._files.limit = 2                                       # files closed and opened again
    assert np.array_equal(data.take(np.arange(24)[::-1]), sigs[::-1]) and np.array_equal(data.take(rows), sigs[rows])
    assert data.ids(rows) == [facts[r][0] for r in rows]
    assert [data.partition_of(r) for r in (0, 6, 7, 18, 19, 23)] == ["a", "a", "c", "c", "d", "d"]
    every = np.arange(24)
    assert np.array_equal(data.band_keys(every, 4, 8), lsh.band_keys(sigs, 4, 8))
    assert np.array_equal(data.band_keys(every, 4, 8, only=range(1, 3)), lsh.band_keys(sigs, 4, 8)[:, 1:3])
    assert [data.source_names[c] for c in data.source] == [f[1] for f in facts]


def test_n_gram_sets_read_from_partition_files_equal_the_sets_in_memory(tmp_path):
    """Rows asked for in any order, again and again, with the open files and the cache of
    distinct sets made small enough to be dropped many times over."""
    from corpuskit.stages import dedup
    rng = np.random.default_rng(4)
    sizes, files, offsets, sets = [3, 0, 5, 4], [], [], []
    for p, n in enumerate(sizes):
        rows = [rng.integers(0, 50, rng.integers(0, 30)).astype(np.uint32) for _ in range(n)]
        np.save(tmp_path / f"p{p}.shingles.npy", np.concatenate(rows + [np.zeros(0, np.uint32)]).astype(np.uint32))
        files.append(tmp_path / f"p{p}.shingles.npy")
        offsets.append(np.concatenate([[0], np.cumsum([len(r) for r in rows])]).astype(np.int64))
        sets += rows
    from_files = dedup.ShingleSets(files, offsets, np.concatenate([[0], np.cumsum(sizes)]))
    from_files.files.limit, from_files.CACHE_VALUES = 2, 40
    asked = rng.integers(0, len(sets), 200).tolist()
    assert all(np.array_equal(from_files.get(r), np.unique(sets[r])) for r in asked)


def test_boilerplate_segments_match_a_direct_count(tmp_path):
    """The array computation against counting documents and sources per segment in plain Python."""
    from collections import defaultdict
    from corpuskit.stages import dedup
    sig_files, fact_files, _, facts = _signature_files(tmp_path, [30, 25, 40], seed=9)
    data = dedup.SignatureSet(32, sig_files, fact_files, ["a", "b", "c"])
    survivors = np.random.default_rng(1).random(len(data)) < 0.7
    params = dedup.Params(boilerplate_min_docs=12, boilerplate_min_sources=3)
    docs, sources = defaultdict(set), defaultdict(set)
    for i, (_, source, hashes) in enumerate(facts):
        if survivors[i]:
            for h in hashes:
                docs[h].add(i)
                sources[h].add(source)
    boiler = {h for h in docs if len(docs[h]) >= 12 and len(sources[h]) >= 3}
    expected = defaultdict(set)
    for i, (_, _, hashes) in enumerate(facts):
        if survivors[i] and set(hashes) & boiler:
            expected["abc"[0 if i < 30 else 1 if i < 55 else 2]] |= set(hashes) & boiler
    got = dedup.boilerplate_segments(data, survivors, params)
    assert boiler and got == {k: sorted(v) for k, v in expected.items()}


def test_split_signatures_taken_from_dedup_equal_signatures_computed_afresh(tmp_path):
    """A document dedup kept whole keeps its signature row; one that lost a segment, or is new,
    is computed again: either way the files equal a computation from scratch."""
    from corpuskit.stages import dedup
    from corpuskit.storage import Cache
    cache = Cache(tmp_path)
    rng = np.random.default_rng(4)
    words = ["kamɛ", "ŋɔ", "sɛli", "tabu", "mɔki", "bɛ", "wɛ", "nɔ"]
    docs = [{"id": f"s:{i}", "source": "s", "seg_index": list(range(3)),
             "segments": [" ".join(rng.choice(words, 6)) for _ in range(3)]} for i in range(40)]
    cache.write_partition("filter", "in", docs, [], {})
    params = dedup.Params(num_perm=32)
    dedup.signatures_task(str(cache.root), "filter", "in", params, "sig-in", "dedup")
    after = [dict(d) for d in docs[:30] if int(d["id"][2:]) % 7]                  # some documents removed
    after[3] = {**after[3], "segments": after[3]["segments"][1:], "seg_index": [1, 2]}   # a segment dropped
    after.append({**docs[0], "id": "s:new"})                                          # and one not seen by dedup
    cache.write_partition("dedup", "out", after, [], {})
    dedup.signatures_task(str(cache.root), "dedup", "out", params, "sig-reused", "split", ("dedup", "sig-in"))
    dedup.signatures_task(str(cache.root), "dedup", "out", params, "sig-fresh", "split")
    assert np.array_equal(np.load(cache.blob_path("split", "sig-reused.npy")), np.load(cache.blob_path("split", "sig-fresh.npy")))
    with np.load(cache.blob_path("split", "sig-reused.npz")) as a, np.load(cache.blob_path("split", "sig-fresh.npz")) as b:
        assert sorted(a.files) == sorted(b.files) and all(np.array_equal(a[k], b[k]) for k in a.files)
    rows = dedup._earlier_rows(cache, ("dedup", "sig-in"), after)
    assert (rows >= 0).sum() == len(after) - 2 and rows[3] == -1 and rows[-1] == -1
