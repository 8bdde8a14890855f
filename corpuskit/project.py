"""``corpuskit new``: a language project folder with a commented recipe template."""
from __future__ import annotations

from pathlib import Path

from .errors import RecipeError

TEMPLATE = Path(__file__).resolve().parent / "templates" / "template.toml"   # package data

ANSWERS = """\
# Answers for the datasheet (Datasheets for Datasets; Data Statements for NLP).
# Fill in what you know; 'corpuskit check' lists what is still open.
[motivation]
purpose = ""
creators = ""
funding = ""

[composition]
instances = ""
sample = ""
labels = ""
missing = ""
errors = ""
confidential = ""
offensive = ""
people = ""
subpopulations = ""
identification = ""
sensitive = ""

[collection]
how = ""
who = ""
timeframe = ""
ethical_review = ""
notice = ""
consent = ""
revocation = ""

[preprocessing]
raw_kept = ""

[uses]
used_for = ""
other_tasks = ""
risks = ""
not_for = ""

[distribution]
to_whom = ""
how = ""
when = ""
terms = ""

[maintenance]
who = ""
contact = ""
updates = ""
retention = ""
contributions = ""

[data_statement]
language_variety = ""
speakers = ""
speech_situation = ""
text_characteristics = ""
transcription = ""
annotators = ""
recording_quality = ""
"""


def new_project(folder: Path, language: str, name: str) -> list[Path]:
    folder = Path(folder)
    if (folder / "recipe.toml").exists():
        raise RecipeError(f"{folder / 'recipe.toml'} already exists; choose an empty folder.")
    for sub in ("sources", "seeds", "tables"):
        (folder / sub).mkdir(parents=True, exist_ok=True)
    text = TEMPLATE.read_text(encoding="utf-8").replace("@LANGUAGE@", language).replace("@NAME@", name)
    made = [folder / "recipe.toml", folder / "datasheet-answers.toml", folder / "seeds" / "README.txt"]
    made[0].write_text(text, encoding="utf-8")
    made[1].write_text(ANSWERS, encoding="utf-8")
    made[2].write_text("Put hand-checked lines here, one per line: one file per dialect of your language,\n"
                       "one per contact language, and one of other text (numbers, names, other languages).\n",
                       encoding="utf-8")
    return made
