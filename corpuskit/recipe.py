"""Load and validate a recipe (one TOML file).

Every table becomes a frozen dataclass.  Unknown keys are an error with a
did-you-mean suggestion; missing or mistyped values give one sentence naming
the file, the key and the fix.  Paths are relative to the recipe's folder and
may not leave it unless ``[corpus] allow_outside_paths = true``.
"""
from __future__ import annotations

import dataclasses
import hashlib
import os
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from .config import Checked, build, param, suggest as _suggest
from .globs import glob_files, glob_prefix
from .scripts import canonical_script
from .errors import RecipeError

__all__ = ["Recipe", "CorpusSpec", "SourceSpec", "load_recipe", "build", "MEDIA", "CONSENT_SCOPES"]

MEDIA = ("speech-transcript", "print-ocr", "typed-message", "web", "elicited", "seed", "other")

# Consent scopes and whether each allows publishing the text.
CONSENT_SCOPES = {
    "redistribution": True,        # contributors agreed to public release
    "research-only": False,        # use in research, no redistribution of the text
    "community-only": False,       # stays with the community that holds it
}


@dataclass(frozen=True)
class CorpusSpec(Checked):
    name: str = param(help="a short name for the corpus")
    language: str = param(help="the target language as a BCP 47 tag, e.g. qxk")
    target_script: str = param("Latn", help="ISO 15924 code of the script the corpus is written in")
    letters: str = param("", help="the orthography's letters, used by the tokenizer")
    apostrophe: str = param("keep", choices=("keep", "modifier", "ascii"),
                            help="how apostrophe-like letters are written")
    answers: str = param("", help="datasheet answers file, relative to the recipe")
    allow_outside_paths: bool = param(False, help="let source paths leave the recipe's folder")
    regions: list[str] = param([], help="ISO 3166-1 codes of the regions where the speakers live, e.g. ['KE', 'TZ']: "
                                        "phone numbers written in their national formats are scrubbed")
    pseudonym_secret: str = param("private/pseudonym-secret.txt",
                                  help="file (relative to the recipe) holding the secret that makes people's pseudonyms; "
                                       "created on the first run; keep it private and keep it")
    protected_patterns: list[str] = param([], help="regular expressions for spans no rewriting step may change, beside "
                                                   "the built-in placeholders, tags, URLs, e-mail addresses and numbers "
                                                   "with units")
    max_files_per_source: int = param(20000, low=1, high=10_000_000, help="refuse globs matching more files")
    partition_docs: int = param(2000, low=1, high=1_000_000, help="documents per partition")
    shard_docs: int = param(5000, low=1, high=100_000_000, help="documents per output shard at most; shards hold whole partitions, "
                                                  "so a partition larger than this is a shard of its own")


@dataclass(frozen=True)
class SourceSpec(Checked):
    id: str = param(help="a short unique name for the source")
    path: str = param(help="a file or glob relative to the recipe")
    format: str = param(help="the reader to use")
    medium: str = param(choices=MEDIA, help="how the text came to be")
    licence: str = param(help="an SPDX licence expression or LicenseRef-...")
    consent: str = param(choices=tuple(CONSENT_SCOPES), help="the scope contributors agreed to")
    dialect: str = param("", help="the dialect, if the whole source is one")
    script: str = param("", help="ISO 15924 code of the script the source is written in; when it is not the target "
                                 "script, the [stages.script] tables entry for it converts the source, token by token")
    contributor: str = param("", help="pseudonymous contributor or team")
    date: str = param("", help="date or year of the material")
    encoding: str = param("utf-8", help="text encoding (a Python codec name such as 'cp1251'), or 'detect'")
    encodings: list[str] = param([], help="with encoding = 'detect': the code pages to choose among, e.g. "
                                          "['cp1251', 'koi8_r'] (default: the common legacy code pages)")
    priority: int = param(0, help="higher wins when duplicates are resolved")
    transliterate: str = param("", help="a transliteration table for this source alone (instead of the table of its "
                                        "script); Latin technical tokens and protected spans are left as they are")
    language: str = param("", help="the source's language as a BCP 47 tag, when it is known: language ID trusts "
                                   "it and does not classify the source's segments")
    attribution: bool = param(False, help="the contributors agreed to be named: keep real speaker, sender and "
                                          "contributor names instead of pseudonyms")
    options: dict = param({}, help="reader options")

    @property
    def redistributable(self) -> bool:
        return CONSENT_SCOPES.get(self.consent, False) and not self.licence.startswith("LicenseRef-restricted")


@dataclass(frozen=True)
class Recipe:
    path: Path
    sha256: str
    corpus: CorpusSpec
    sources: tuple[SourceSpec, ...]
    stages: dict[str, Any]

    @property
    def folder(self) -> Path:
        return self.path.parent

    def resolve(self, value: str, key: str) -> Path:
        """A path named in the recipe, relative to its folder, checked not to escape it."""
        return resolve_inside(self.folder, value, key, self.path, self.corpus.allow_outside_paths)

    def source_files(self, source: SourceSpec) -> list[Path]:
        return self.source_files_and_notes(source)[0]

    def source_files_and_notes(self, source: SourceSpec) -> tuple[list[Path], list[str]]:
        """The files a source's glob matches, each real file once (symlinks followed, loops
        and links to the same file counted once), and notes on what was skipped (links that
        lead nowhere or loop)."""
        pattern = str(self.folder / source.path)
        where = f"[[sources]] id = '{source.id}', key 'path'"
        if not self.corpus.allow_outside_paths:
            resolve_inside(self.folder, source.path.split("*")[0] or ".", where, self.path, False)
        matches: list[Path] = []
        notes: list[str] = []
        seen: set[str] = set()
        for i, name in enumerate(glob_files(pattern)):
            if i >= 4 * self.corpus.max_files_per_source or len(matches) >= self.corpus.max_files_per_source:
                raise RecipeError(
                    f"{self.path}: {where} matches more than {self.corpus.max_files_per_source} files; "
                    "narrow the glob or raise [corpus] max_files_per_source.")
            p = Path(name)
            try:
                real = os.path.realpath(name)
                is_file = p.is_file()
            except OSError:
                real, is_file = name, False
            if not is_file:
                if p.is_symlink():
                    notes.append(f"{os.path.relpath(name, self.folder)}: a link that leads to no file (dangling or a "
                                 "loop); skipped")
                continue
            if real in seen:
                continue
            seen.add(real)
            if not self.corpus.allow_outside_paths:
                resolve_inside(self.folder, os.path.relpath(name, self.folder), where, self.path, False)
            matches.append(p)
        if not matches:
            raise RecipeError(f"{self.path}: {where} = '{source.path}' matches no file; "
                              "check the path, which is relative to the recipe's folder.")
        return sorted(matches, key=lambda p: str(p)), notes

    def stage(self, name: str) -> Any:
        return self.stages[name]

    @property
    def secret_path(self) -> Path:
        """Where the pseudonym secret lives (inside the recipe's folder unless allowed outside)."""
        return self.resolve(self.corpus.pseudonym_secret, "[corpus] pseudonym_secret")


def resolve_inside(folder: Path, value: str, key: str, recipe_path: Path, allowed: bool) -> Path:
    path = (folder / value)
    try:
        real = Path(os.path.realpath(path))
    except (OSError, RuntimeError) as exc:  # symlink loops on some systems
        raise RecipeError(f"{recipe_path}: {key} = '{value}' cannot be resolved ({exc}); "
                          "remove the symlink loop.") from None
    root = Path(os.path.realpath(folder))
    if not allowed and real != root and root not in real.parents:
        raise RecipeError(
            f"{recipe_path}: {key} = '{value}' leads outside the recipe's folder ({root}); "
            "move the files under that folder or set [corpus] allow_outside_paths = true.")
    return path


def load_recipe(path: str | os.PathLike) -> Recipe:
    from .stages.registry import STAGES  # the stages declare their own parameter tables

    path = Path(path)
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise RecipeError(f"{path}: no such recipe file; check the path or start one with 'corpuskit new'.") from None
    except OSError as exc:
        raise RecipeError(f"{path}: cannot read the recipe ({exc.strerror}).") from None
    try:
        data = tomllib.loads(raw.decode("utf-8"))
    except UnicodeDecodeError as exc:
        raise RecipeError(f"{path}: the recipe is not UTF-8 text (byte {exc.start}); save it as UTF-8.") from None
    except tomllib.TOMLDecodeError as exc:
        raise RecipeError(f"{path}: TOML syntax error: {exc}; fix the line named.") from None
    top = {"corpus", "sources", "stages"}
    for key in data:
        if key not in top:
            raise RecipeError(f"{path}: unknown top-level key '{key}'{_suggest(key, top)}")
    if "corpus" not in data:
        raise RecipeError(f"{path}: missing the [corpus] table; add [corpus] with name and language.")
    corpus = build(CorpusSpec, data["corpus"], "[corpus]", path)
    _check_language(corpus, path)
    corpus = dataclasses.replace(corpus, target_script=canonical_script(corpus.target_script))
    _check_regions(corpus, path)
    raw_sources = data.get("sources", [])
    if not isinstance(raw_sources, list) or not raw_sources:
        raise RecipeError(f"{path}: no [[sources]] given; add at least one [[sources]] table with id, path and format.")
    sources = []
    from .readers import READERS
    for i, table in enumerate(raw_sources):
        where = f"[[sources]] #{i + 1}" + (f" (id = '{table.get('id')}')" if isinstance(table, dict) and "id" in table else "")
        src = build(SourceSpec, table, where, path)
        if src.script:
            _check_script(src.script, f"{where} key 'script'", path)
            src = dataclasses.replace(src, script=canonical_script(src.script))
        if src.format not in READERS:
            raise RecipeError(f"{path}: {where} key 'format' = '{src.format}' is not a known reader"
                              f"{_suggest(src.format, READERS)}")
        _check_licence(src.licence, f"{where} key 'licence'", path)
        if src.language and not is_valid_language_tag(src.language):
            raise RecipeError(f"{path}: {where} key 'language' = '{src.language}' is not a valid BCP 47 tag; use e.g. "
                              f"'{corpus.language}' for a source known to be in the target language.")
        build(READERS[src.format].Options, src.options, f"{where} options", path)
        for code in src.encodings:
            _check_codec(code, f"{where} key 'encodings'", path)
        if src.encoding.lower() != "detect":
            _check_codec(src.encoding, f"{where} key 'encoding'", path)
        if not corpus.allow_outside_paths:
            static = os.path.dirname(glob_prefix(src.path)) or "."
            resolve_inside(path.parent, static, f"{where} key 'path'", path, False)
        sources.append(src)
    ids = [s.id for s in sources]
    dup = {i for i in ids if ids.count(i) > 1}
    if dup:
        raise RecipeError(f"{path}: source id '{sorted(dup)[0]}' is used twice; give each [[sources]] a unique id.")
    stage_tables = data.get("stages", {})
    if not isinstance(stage_tables, dict):
        raise RecipeError(f"{path}: [stages] must be a table of stage tables.")
    for key in stage_tables:
        if key not in STAGES:
            raise RecipeError(f"{path}: [stages] has unknown stage '{key}'{_suggest(key, STAGES)}")
    stages = {name: build(stage.params, stage_tables.get(name, {}), f"[stages.{name}]", path)
              for name, stage in STAGES.items()}
    return Recipe(path=path.resolve(), sha256=hashlib.sha256(raw).hexdigest(), corpus=corpus,
                  sources=tuple(sources), stages=stages)


def _check_script(code: str, where: str, path: Path) -> None:
    if canonical_script(code) is None:
        raise RecipeError(f"{path}: {where} = '{code}' is not an ISO 15924 script code; use a four-letter code such "
                          "as 'Latn', 'Cyrl', 'Arab' or 'Aran' (the registry's list is in pycountry.scripts).")


def _check_codec(name: str, where: str, path: Path) -> None:
    import codecs
    try:
        codecs.lookup(name)
    except LookupError:
        raise RecipeError(f"{path}: {where} = '{name}' is not an encoding Python knows; use a codec name such as "
                          "'utf-8', 'cp1251' or 'koi8_r', or encoding = 'detect'.") from None


def _check_regions(corpus: CorpusSpec, path: Path) -> None:
    from .pii import is_region
    for code in corpus.regions:
        if not is_region(code):
            hint = f"; did you mean '{code.upper()}'?" if is_region(code.upper()) else ""
            raise RecipeError(f"{path}: [corpus] key 'regions' has '{code}', which is not an ISO 3166-1 alpha-2 region "
                              f"code{hint}; use two capital letters such as 'KE' or 'DE'.")


def _check_language(corpus: CorpusSpec, path: Path) -> None:
    if not is_valid_language_tag(corpus.language):
        raise RecipeError(f"{path}: [corpus] key 'language' = '{corpus.language}' is not a valid BCP 47 tag; "
                          "use e.g. 'qxk' or 'qxk-Latn' (local-use codes are qaa-qtz).")
    _check_script(corpus.target_script, "[corpus] key 'target_script'", path)


def is_valid_language_tag(tag: str) -> bool:
    """BCP 47 validity via langcodes, accepting the local-use range qaa-qtz (RFC 5646 registry).

    langcodes knows the range only by its end points, so a local-use primary
    subtag is checked as 'qaa' with the rest of the tag unchanged.

    >>> is_valid_language_tag("qnv-x-hill"), is_valid_language_tag("de-419-DE")
    (True, False)
    """
    import langcodes

    first, _, rest = tag.partition("-")
    if len(first) == 3 and first.isalpha() and "qaa" <= first.lower() <= "qtz":
        tag = "qaa" + ("-" + rest if rest else "")
    return langcodes.tag_is_valid(tag)


def _check_licence(expression: str, where: str, path: Path) -> None:
    from license_expression import ExpressionError, get_spdx_licensing

    try:
        info = get_spdx_licensing().validate(expression)
    except ExpressionError as exc:  # pragma: no cover - validate() reports instead of raising
        info = None
        raise RecipeError(f"{path}: {where} = '{expression}' is not an SPDX expression ({exc}).") from None
    unknown = [k for k in info.invalid_symbols if not str(k).startswith("LicenseRef-")]
    if info.errors and not all("Unknown license key" in e for e in info.errors) or unknown:
        raise RecipeError(f"{path}: {where} = '{expression}' is not a valid SPDX licence expression; "
                          "use an identifier such as CC-BY-4.0, or LicenseRef-<name> for a community licence.")
