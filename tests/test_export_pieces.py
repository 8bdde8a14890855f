"""The export's pieces: bottom-k line samples, shard grouping, joining byte sections."""
import gzip

import numpy as np
from hypothesis import example, given, settings, strategies as st

from corpuskit.reports.balance import Accumulator
from corpuskit.stages.export_pieces import (EMPTY_GZIP, SampleMerger, join_sections, line_priority, pack_texts,
                                            shard_groups, unpack_texts)


def _sample(pieces: list[list[tuple[str, int, str]]], k: int) -> list[str]:
    """Merge per-piece bottom-k samples of (doc id, position, text) as the export does."""
    merger = SampleMerger({"train": k, "train:": k, "dev:": k})
    prepared = []
    for piece in pieces:
        chosen = sorted((line_priority(d, i), t) for d, i, t in piece)[:k]
        pr = np.array([p for p, _ in chosen], dtype="<u8")
        groups = {"train": len(chosen)} if chosen else {}
        merger.add_priorities(groups, pr)
        prepared.append((groups, pr, unpack_texts(*pack_texts([t for _, t in chosen]))))
    cutoffs = merger.cutoffs()
    into: dict = {"train": []}
    for groups, pr, lines in prepared:
        SampleMerger.read(lines, groups, pr, cutoffs, into)
    return [t for _, t in sorted(into["train"])]


lines = st.lists(st.tuples(st.sampled_from(["a:1", "a:2", "b:7", "c:3"]), st.integers(0, 30), st.sampled_from("xyzw")),
                 unique_by=lambda x: (x[0], x[1]), max_size=60)


@settings(max_examples=60, deadline=None)
@given(lines, st.integers(1, 25), st.integers(1, 5), st.randoms(use_true_random=False))
def test_bottom_k_sample_does_not_depend_on_partitioning_or_order(items, k, n_pieces, rnd):
    """The merged sample is the k lines of lowest priority over everything, whatever the pieces."""
    expected = [t for _, t in sorted((line_priority(d, i), t) for d, i, t in items)[:k]]
    shuffled = list(items)
    rnd.shuffle(shuffled)
    pieces = [shuffled[j::n_pieces] for j in range(n_pieces)]
    assert _sample(pieces, k) == expected
    assert _sample([items], k) == expected


@settings(max_examples=200, deadline=None)
@given(st.lists(st.text(st.characters(min_codepoint=0, max_codepoint=0x10FFFF)), max_size=20))
@example(["a\ud800b", "", "\udfff", "x\ny\u2028z\r"])
def test_packed_texts_come_back_whole(texts):
    """Any text survives, with line breaks of every kind (LF, CR, U+2028, U+0085) and lone
    surrogates; empty texts keep their place."""
    assert unpack_texts(*pack_texts(texts)) == texts


def test_shard_groups_hold_whole_pieces():
    assert shard_groups([3, 3, 3, 0, 3], 6) == [[0, 1], [2, 4]]
    assert shard_groups([10, 2], 6) == [[0], [1]]          # a piece larger than a shard is one shard
    assert shard_groups([0, 0], 6) == [[]]                 # always one (empty) shard
    assert shard_groups([5, 5, 5], None) == [[0, 1, 2]]


def test_joined_gzip_members_read_as_one_stream(tmp_path):
    """RFC 1952 section 2.2: a gzip file is a series of members; readers return their concatenation."""
    piece = tmp_path / "p.bin"
    a, b = gzip.compress(b'{"id": 1}\n', mtime=0), gzip.compress(b'{"id": 2}\n', mtime=0)
    piece.write_bytes(b"junk" + a + b)
    out = tmp_path / "joined.jsonl.gz"
    join_sections(out, [(piece, [4, len(a)]), (piece, [4 + len(a), len(b)])], empty=EMPTY_GZIP)
    assert gzip.decompress(out.read_bytes()) == b'{"id": 1}\n{"id": 2}\n'
    join_sections(out, [], empty=EMPTY_GZIP)
    assert gzip.decompress(out.read_bytes()) == b""


@settings(max_examples=40, deadline=None)
@given(st.lists(st.tuples(st.sampled_from(["hill", "river"]), st.lists(st.sampled_from(["ma", "ko", "sɛ", "lé", "tu"]),
                                                                        max_size=6)), max_size=25), st.integers(1, 4))
def test_balance_accumulator_merged_from_pieces_equals_one_pass(docs, n_pieces):
    """Counts, types and the type-token growth curve come out the same however the stream is cut."""
    records = [{"segments": [" ".join(words)], "dialect": d, "source": "s", "medium": "web", "script": "Latn",
                "contributor": None} for d, words in docs]
    whole = Accumulator()
    for r in records:
        whole.add(r)
    cut = sorted({len(records) * j // n_pieces for j in range(n_pieces + 1)})
    merged = Accumulator()
    for lo, hi in zip(cut, cut[1:]):
        piece = Accumulator()
        for r in records[lo:hi]:
            piece.add(r)
        merged.merge(piece.state())
    assert merged.growth == whole.growth
    assert {a: dict(v) for a, v in merged.rows.items()} == {a: dict(v) for a, v in whole.rows.items()}
    assert {a: dict(v) for a, v in merged.types.items()} == {a: dict(v) for a, v in whole.types.items()}
