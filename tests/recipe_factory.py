"""Small two-language corpora and recipes written into a temporary directory, for tests."""

from __future__ import annotations

from pathlib import Path

CONDITIONS = """
[[condition]]
name = "shared"
policy = "shared"
[[condition]]
name = "word-tagged"
policy = "word-tagged"
"""


def write_corpus(tmp: Path, en: list[str], de: list[str], tables: str = "", seed: int = 11,
                 en_extra: str = "", de_extra: str = "") -> Path:
    """Write en.txt, de.txt and a recipe using them; return the recipe path."""
    (tmp / "en.txt").write_text("".join(line + "\n" for line in en), encoding="utf-8")
    (tmp / "de.txt").write_text("".join(line + "\n" for line in de), encoding="utf-8")
    recipe = tmp / "recipe.toml"
    recipe.write_text(f"""
[build]
name = "test"
seed = {seed}
[languages.en]
inputs = ["en.txt"]
{en_extra}
[languages.de]
inputs = ["de.txt"]
{de_extra}
{tables}
{CONDITIONS}
""", encoding="utf-8")
    return recipe


def kellhaven_lines(lang: str, count: int, start: int = 0) -> list[str]:
    """Distinct invented sentences (demo data only, never a check value)."""
    if lang == "en":
        words = ["boat", "harbour", "gull", "net", "rope", "pier", "tide", "lamp"]
        return [f"The {words[i % 8]} number {i} waits by the {words[(i * 3) % 8]} ." for i in range(start, start + count)]
    words = ["Boot", "Hafen", "Möwe", "Netz", "Seil", "Steg", "Flut", "Lampe"]
    return [f"Das {words[i % 8]} Nummer {i} wartet am {words[(i * 5) % 8]} ." for i in range(start, start + count)]
