"""The ``bivocab audit`` command: outputs, JSON, and one-line errors with exit code 2."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest
from click.testing import CliRunner

from audit_builds import RECIPE, make_build
from bivocab.cli import main


@pytest.fixture(scope="module")
def build_dir(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return make_build(tmp_path_factory.mktemp("cli"), lines=200)


def run(*args: str):
    return CliRunner().invoke(main, ["audit", *map(str, args)])


def test_audit_writes_every_output_and_prints_a_summary(build_dir):
    result = run(build_dir)
    assert result.exit_code == 0, result.output
    assert "overlap:" in result.output and "coverage" in result.output
    assert sorted(p.name for p in (build_dir / "audit").iterdir()) == sorted(
        ["summary.json", "homographs.tsv", "variants.tsv", "near-homographs.tsv", "report.html"])


def test_json_option_prints_summary_json(build_dir):
    result = run(build_dir, "--json")
    assert result.exit_code == 0
    assert json.loads(result.output) == json.loads((build_dir / "audit" / "summary.json").read_text(encoding="utf-8"))


def test_lexicon_and_translations_add_label_columns(build_dir, tmp_path):
    words = tmp_path / "de.txt"
    words.write_text("Hafen\nKind\nalso\n", encoding="utf-8")
    pairs = tmp_path / "pairs.tsv"
    pairs.write_text("kind\tfreundlich\nchild\tKind\nhotel\tHotel\n", encoding="utf-8")  # from memory
    result = run(build_dir, "--lexicon", f"de={words}", "--translations", pairs, "--json")
    assert result.exit_code == 0, result.output
    summary = json.loads(result.output)
    assert summary["variants"]["translation_labels"]["false-friend"] >= 1
    assert summary["homographs"]["attested"]["de"] >= 1
    header = (build_dir / "audit" / "homographs.tsv").read_text(encoding="utf-8").split("\n")[0].split("\t")
    assert header[-2:] == ["attested_de", "translation"]


def test_not_a_build_directory_is_a_one_line_error(tmp_path):
    result = run(tmp_path)
    assert result.exit_code == 2
    assert result.output.strip().count("\n") == 0 and "not a build directory" in result.output


@pytest.mark.parametrize("option, message", [
    ("en", "expected TAG=FILE"),
    ("fr=/usr/share/dict/french", "'fr' is not a language of this build"),
])
def test_bad_lexicon_option_is_a_usage_error(build_dir, option, message):
    result = run(build_dir, "--lexicon", option)
    assert result.exit_code == 2 and message in result.output


def test_malformed_translations_leave_no_new_audit(tmp_path):
    out = make_build(tmp_path, lines=60)
    pairs = tmp_path / "pairs.tsv"
    pairs.write_text("gift\tGeschenk\nbroken line\n", encoding="utf-8")
    result = run(out, "--translations", pairs)
    assert result.exit_code == 2 and "pairs.tsv:2:" in result.output
    assert not (out / "audit").exists()


def test_changed_input_is_refused(tmp_path):
    out = make_build(tmp_path, lines=60)
    with open(tmp_path / "corpus" / "en" / "part0.txt", "a", encoding="utf-8") as handle:
        handle.write("Kellhaven quay .\n")
    result = run(out)
    assert result.exit_code == 2
    assert "corpus/en/part0.txt: changed since the build" in result.output


def test_condition_named_audit_is_refused(tmp_path):
    recipe = RECIPE.format(train=0.8, valid=0.1, test=0.1).replace('name = "capped"', 'name = "audit"')
    out = make_build(tmp_path, lines=60, recipe_text=recipe)
    result = run(out)
    assert result.exit_code == 2 and "condition 'audit'" in result.output
    assert (out / "audit" / "vocab.tsv").exists()


def test_foreign_files_in_the_audit_directory_are_kept(build_dir, tmp_path):
    # Copy corpus, recipe and build together: build.json locates the recipe relative to itself.
    shutil.copytree(build_dir.parent, tmp_path / "project")
    copy = tmp_path / "project" / "build"
    (copy / "audit").mkdir(exist_ok=True)
    (copy / "audit" / "notes.txt").write_text("mine", encoding="utf-8")
    result = run(copy)
    assert result.exit_code == 2 and "holds files that are not an audit" in result.output
    assert (copy / "audit" / "notes.txt").read_text(encoding="utf-8") == "mine"


def test_a_second_audit_replaces_the_first_as_a_whole(build_dir):
    assert run(build_dir).exit_code == 0
    first = {name: (build_dir / "audit" / name).read_bytes() for name in ("summary.json", "report.html")}
    (build_dir / ".audit.tmp-99999").mkdir()  # as left by a killed audit
    assert run(build_dir).exit_code == 0
    # Byte-identical: the PNGs carry no timestamp or software version.
    assert {name: (build_dir / "audit" / name).read_bytes() for name in first} == first
    assert not list(build_dir.glob(".audit.*"))


def test_quiet_prints_nothing(build_dir):
    result = run(build_dir, "--quiet")
    assert result.exit_code == 0 and result.output == ""


def test_incomplete_build_is_refused(tmp_path):
    out = make_build(tmp_path, lines=60)
    (out / ".bivocab-incomplete").write_text("kellhaven-audit\n", encoding="utf-8")
    result = run(out)
    assert result.exit_code == 2 and "incomplete" in result.output


def test_audit_leaves_every_build_file_unchanged(build_dir):
    from bivocab.manifest import sha256_file

    assert run(build_dir).exit_code == 0
    manifest = json.loads((build_dir / "build.json").read_text(encoding="utf-8"))
    assert all(sha256_file(build_dir / f["path"]) == f["sha256"] for f in manifest["files"])


def test_edited_build_file_is_refused(tmp_path):
    out = make_build(tmp_path, lines=60)
    with open(out / "types" / "en.tsv", "a", encoding="utf-8") as handle:
        handle.write("Kellhaven\tword\t1\t0\t0\n")
    result = run(out)
    assert result.exit_code == 2 and "types/en.tsv: changed since the build" in result.output
