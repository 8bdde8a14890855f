"""Each recipe mistake gives one sentence naming the file, the key and the fix."""
import pytest

from corpuskit.errors import RecipeError
from corpuskit.recipe import is_valid_language_tag, load_recipe

from .conftest import ROOT, copy_demo

BASE = '''
[corpus]
name = "t"
language = "qnv"

[[sources]]
id = "s"
path = "texts/*.txt"
format = "text"
medium = "web"
licence = "CC-BY-4.0"
consent = "redistribution"
'''


def write(tmp_path, text):
    (tmp_path / "texts").mkdir(exist_ok=True)
    (tmp_path / "texts" / "a.txt").write_text("one line\n", "utf-8")
    p = tmp_path / "recipe.toml"
    p.write_text(text, "utf-8")
    return p


def error(tmp_path, text) -> str:
    with pytest.raises(RecipeError) as exc:
        load_recipe(write(tmp_path, text))
    return str(exc.value)


def test_valid_recipe_loads(tmp_path):
    r = load_recipe(write(tmp_path, BASE))
    assert r.corpus.language == "qnv" and r.sources[0].id == "s"
    assert [p.name for p in r.source_files(r.sources[0])] == ["a.txt"]


def test_unknown_key_suggests(tmp_path):
    msg = error(tmp_path, BASE + '\n[stages.dedup]\nthreshhold = 0.8\n')
    assert "recipe.toml" in msg and "[stages.dedup]" in msg and "'threshhold'" in msg and "did you mean 'threshold'" in msg


def test_unknown_stage_suggests(tmp_path):
    assert "did you mean 'dedup'" in error(tmp_path, BASE + '\n[stages.dedupe]\n')


def test_mistyped_value_names_key_and_fix(tmp_path):
    msg = error(tmp_path, BASE + '\n[stages.dedup]\nthreshold = "high"\n')
    assert "key 'threshold'" in msg and "must be a number" in msg


def test_out_of_range(tmp_path):
    assert "between 0.1 and 1.0" in error(tmp_path, BASE + '\n[stages.dedup]\nthreshold = 3\n')


def test_missing_key(tmp_path):
    msg = error(tmp_path, BASE.replace('medium = "web"\n', ""))
    assert "missing key 'medium'" in msg and "[[sources]]" in msg


def test_bad_choice(tmp_path):
    msg = error(tmp_path, BASE.replace('consent = "redistribution"', 'consent = "public"'))
    assert "key 'consent'" in msg and "redistribution" in msg


def test_path_escaping_folder_refused(tmp_path):
    msg = error(tmp_path, BASE.replace('texts/*.txt', '../../etc/*'))
    assert "outside the recipe's folder" in msg and "allow_outside_paths" in msg


def test_symlink_out_of_folder_refused(tmp_path):
    outside = tmp_path.parent / f"{tmp_path.name}-outside"
    outside.mkdir()
    (outside / "b.txt").write_text("x\n")
    write(tmp_path, BASE)
    (tmp_path / "texts" / "link.txt").symlink_to(outside / "b.txt")
    r = load_recipe(tmp_path / "recipe.toml")
    with pytest.raises(RecipeError, match="outside the recipe's folder"):
        r.source_files(r.sources[0])


def test_symlink_loop_is_a_clear_error(tmp_path):
    write(tmp_path, BASE.replace('texts/*.txt', 'loop/*.txt'))
    (tmp_path / "loop").symlink_to(tmp_path / "loop")
    r = load_recipe(tmp_path / "recipe.toml")
    with pytest.raises(RecipeError):
        r.source_files(r.sources[0])


def test_too_many_files(tmp_path):
    r = write(tmp_path, BASE.replace('name = "t"', 'name = "t"\nmax_files_per_source = 3'))
    for i in range(5):
        (tmp_path / "texts" / f"f{i}.txt").write_text("x\n")
    rec = load_recipe(r)
    with pytest.raises(RecipeError, match="matches more than 3 files"):
        rec.source_files(rec.sources[0])


def test_bad_licence(tmp_path):
    assert "SPDX" in error(tmp_path, BASE.replace("CC-BY-4.0", "Creative Commons"))


def test_unknown_format_suggests(tmp_path):
    assert "did you mean 'webvtt'" in error(tmp_path, BASE.replace('format = "text"', 'format = "webvt"'))


def test_toml_syntax_error_names_line(tmp_path):
    assert "line" in error(tmp_path, BASE + "\n[corpus\n")


# RFC 5646 Appendix A examples (valid and invalid tags), per the project's references sheet.
@pytest.mark.parametrize("tag,ok", [("qaa-Qaaa-QM-x-southern", True), ("sr-Latn-RS", True), ("es-419", True),
                                    ("de-CH-1901", True), ("de-419-DE", False), ("a-DE", False),
                                    ("ar-a-aaa-b-bbb-a-ccc", False), ("qnv", True), ("qnv-x-hill", True)])
def test_bcp47_rfc5646_examples(tag, ok):
    assert is_valid_language_tag(tag) is ok


def test_invalid_language_tag(tmp_path):
    msg = error(tmp_path, BASE.replace('language = "qnv"', 'language = "xx-yy-zz-qq"'))
    assert "BCP 47" in msg and "'language'" in msg


def test_recipe_reference_is_in_step_with_the_code():
    """RECIPE.md is generated from the parameter declarations; regenerate it with
    `python -m corpuskit.reference > RECIPE.md` after changing a parameter."""
    from corpuskit.reference import render
    assert (ROOT / "RECIPE.md").read_text("utf-8") == render()
    text = render()
    for key in ("transliterate", "regions", "protected_patterns", "pseudonym_secret", "min_share", "context_letters"):
        assert f"| `{key}` |" in text, key


def test_a_source_in_another_script_needs_a_table(tmp_path):
    recipe = copy_demo(tmp_path)
    text = recipe.read_text("utf-8").replace('tables = { Cyrl = "tables/demo-cyrl-latn.tsv" }', "tables = {}")
    recipe.write_text(text, "utf-8")
    from corpuskit.validate import validate
    with pytest.raises(RecipeError, match=r"'river-hymns' is written in Cyrl.*no Cyrl table"):
        validate(load_recipe(recipe))


def test_cache_keys_follow_the_code_of_helper_modules():
    """A stage's cache key covers its module and every corpuskit module it imports: helpers that carry
    no VERSION of their own (transliteration, protected spans, the variant table) are included."""
    from corpuskit.codeversion import code_version, imported_modules
    assert {"corpuskit.transliterate", "corpuskit.protect"} <= imported_modules("corpuskit.stages.script")
    assert "corpuskit.variants_table" in imported_modules("corpuskit.stages.variants")
    assert "corpuskit.pii" in imported_modules("corpuskit.stages.qualityfilter")
    assert code_version("corpuskit.stages.script") != code_version("corpuskit.stages.dedup")


def test_cache_keys_do_not_follow_imports_that_never_run():
    """Ingest names the recipe module for a type checker only, and ``from .. import transliterate``
    runs the package's ``__init__`` but not the public API its ``__getattr__`` loads on demand:
    editing the export or the audit must not make every earlier stage's results stale."""
    from corpuskit.codeversion import imported_modules
    for stage in ("ingest", "clean", "normalise", "script", "variants", "langid", "qualityfilter", "dedup", "split"):
        modules = imported_modules(f"corpuskit.stages.{stage}")
        assert not modules & {"corpuskit.recipe", "corpuskit.api", "corpuskit.runner", "corpuskit.stages.export",
                              "corpuskit.audit"}, stage
    assert {"corpuskit.readers.webvtt", "corpuskit.records"} <= imported_modules("corpuskit.stages.ingest")
    assert "corpuskit.audit" in imported_modules("corpuskit.stages.export_pieces")
