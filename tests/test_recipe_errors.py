"""Recipe and command-line errors: one clear line naming the file, line and key; exit 2; no traceback."""

from __future__ import annotations

from pathlib import Path

import pytest
from click.testing import CliRunner

from bivocab.cli import main
from conftest import RECIPE_TEMPLATE, write_corpus


def run(*args: str):
    result = CliRunner().invoke(main, list(args), catch_exceptions=False)
    return result.exit_code, result.output


def recipe_with(tmp_path: Path, text: str) -> Path:
    write_corpus(tmp_path, sentences=50)
    path = tmp_path / "recipe.toml"
    path.write_text(text, encoding="utf-8")
    return path


def one_error_line(output: str) -> str:
    lines = [l for l in output.splitlines() if l.strip()]
    assert len(lines) == 1, output
    assert lines[0].startswith("error: ") and "Traceback" not in output
    return lines[0]


BASE = RECIPE_TEMPLATE.format(extra="")


@pytest.mark.parametrize("text, expected", [
    (BASE.replace("seed = 3", "seed = 3\ncolour = 1"), "recipe.toml:4: [build] colour: unknown key"),
    (BASE.replace("seed = 3", 'seed = "three"'), "recipe.toml:3: [build] seed: expected int, got str"),
    (BASE + "\n[vocab]\nmax_size = -5\n", "[vocab] max_size: must be >= 0"),
    (BASE + "\n[vocab]\nmin_count = 1.5\n", "[vocab] min_count: expected int, got float"),
    (BASE.replace("[languages.de]", "[languages.deutsch-xx-yy-zz-99]"), "is not a valid BCP 47 language tag"),
    (BASE.replace('name = "word-tagged"', 'name = "shared"'), "duplicate condition name 'shared'"),
    (BASE.replace('policy = "fully-tagged"', 'policy = "half-tagged"'), "expected one of 'shared', 'word-tagged', 'fully-tagged'"),
    (BASE.replace("[build]\n", "[bild]\n"), "[bild]: unknown table"),
    (BASE.split("[[condition]]")[0], "missing [[condition]] table"),
    ("[build\nname=1", "invalid TOML"),
    (BASE + "\n[splits]\ntrain = 0.5\nvalid = 0.1\ntest = 0.1\n", "fractions must be >= 0 and add up to 1"),
])
def test_bad_recipe_gives_one_line_with_file_line_and_key(tmp_path, text, expected):
    code, output = run("check", str(recipe_with(tmp_path, text)))
    assert code == 2
    assert expected in one_error_line(output)


def test_unknown_key_error_names_the_line_inside_the_right_condition(tmp_path):
    text = BASE.replace('name = "fully-tagged"\npolicy = "fully-tagged"', 'name = "fully-tagged"\npolicy = "fully-tagged"\nsise = 3')
    code, output = run("check", str(recipe_with(tmp_path, text)))
    line = text.splitlines().index("sise = 3") + 1
    assert code == 2 and f"recipe.toml:{line}: [condition] sise: unknown key" in one_error_line(output)


def test_missing_recipe_file(tmp_path):
    code, output = run("check", str(tmp_path / "nope.toml"))
    assert code == 2 and "recipe file not found" in one_error_line(output)


def test_glob_matching_nothing(tmp_path):
    path = recipe_with(tmp_path, BASE.replace('"de/*.txt"', '"deutsch/*.txt"'))
    code, output = run("build", str(path), "--out", str(tmp_path / "out"))
    assert code == 2 and "'deutsch/*.txt' matches no file" in one_error_line(output)
    assert not (tmp_path / "out").exists()


def test_unreadable_input_file(tmp_path):
    path = recipe_with(tmp_path, BASE)
    target = tmp_path / "de" / "part.txt"
    target.unlink()
    target.symlink_to(tmp_path / "de" / "missing.txt")  # a dangling link: globbed, then unreadable
    code, output = run("build", str(path), "--out", str(tmp_path / "out"))
    assert code == 2 and "de/part.txt" in one_error_line(output)
    assert not (tmp_path / "out" / "build.json").exists()


def test_undecodable_bytes_name_file_line_and_byte_offset(tmp_path):
    path = recipe_with(tmp_path, BASE)
    (tmp_path / "de" / "part.txt").write_bytes("eins zwei\ndrei vier\nfünf \xff sechs\n".encode("latin-1"))
    code, output = run("build", str(path), "--out", str(tmp_path / "out"))
    line = one_error_line(output)
    assert code == 2 and "de/part.txt:3: invalid UTF-8 at byte 1 of the line" in line
    assert not (tmp_path / "out" / "build.json").exists()


def test_undecodable_bytes_can_be_replaced_and_are_counted(tmp_path):
    import json
    path = recipe_with(tmp_path, BASE + '\n[clean]\ninvalid_utf8 = "replace"\n')
    (tmp_path / "de" / "part.txt").write_bytes(b"eins zwei\nf\xfcnf sechs\n")
    code, output = run("build", str(path), "--out", str(tmp_path / "out"))
    assert code == 0, output
    report = [i["report"] for i in json.loads((tmp_path / "out" / "build.json").read_text())["inputs"]
              if i["path"].startswith("de")][0]
    assert report["invalid_utf8_replaced_lines"] == 1


def test_output_directory_with_foreign_files_needs_force(tmp_path):
    path = recipe_with(tmp_path, BASE)
    out = tmp_path / "out"
    out.mkdir()
    (out / "thesis.tex").write_text("mine")
    code, output = run("build", str(path), "--out", str(out))
    assert code == 2 and "--force" in one_error_line(output)
    assert (out / "thesis.tex").read_text() == "mine" and not (out / "build.json").exists()
    code, _ = run("build", str(path), "--out", str(out), "--force", "--quiet")
    assert code == 0 and (out / "build.json").exists() and (out / "thesis.tex").exists()


def test_output_directory_holding_another_recipes_build_is_refused(tmp_path):
    path = recipe_with(tmp_path, BASE)
    out = tmp_path / "out"
    assert run("build", str(path), "--out", str(out), "--quiet")[0] == 0
    other = tmp_path / "other.toml"
    other.write_text(BASE.replace('name = "tiny"', 'name = "another"'))
    code, output = run("build", str(other), "--out", str(out))
    assert code == 2 and "a build of recipe 'tiny'" in one_error_line(output)


def test_init_writes_a_starter_recipe_that_check_accepts(tmp_path):
    code, output = run("init", str(tmp_path / "study"))
    assert code == 0
    write_corpus(tmp_path / "study" / "corpus", sentences=40)
    code, output = run("check", str(tmp_path / "study" / "recipe.toml"))
    assert code == 0, output
    assert "ok: recipe and inputs are valid" in output and "fully-tagged" in output
    code, output = run("init", str(tmp_path / "study"))
    assert code == 2 and "already exists" in one_error_line(output)
