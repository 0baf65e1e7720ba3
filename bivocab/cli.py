"""Command line: thin click commands over the library; user mistakes are one line, exit 2."""

from __future__ import annotations

import atexit
import os
import sys
from pathlib import Path

import click

from . import __version__
from .errors import BivocabError
from .defaults import DEFAULT_NGRAM


class _Group(click.Group):
    def invoke(self, ctx: click.Context):
        try:
            return super().invoke(ctx)
        except BivocabError as exc:
            click.echo(f"error: {exc}", err=True)
            ctx.exit(exc.exit_code)


@click.group(cls=_Group)
@click.version_option(__version__, prog_name="bivocab")
def main() -> None:
    """Build, measure and reproduce vocabularies for bilingual language models."""


@main.command()
@click.argument("directory", type=click.Path(file_okay=False, path_type=Path))
def init(directory: Path) -> None:
    """Write a commented starter recipe into DIRECTORY/recipe.toml."""
    from .manifest import atomic_write_text
    from .recipe import STARTER_RECIPE

    target = directory / "recipe.toml"
    if target.exists():
        raise BivocabError(f"{target}: already exists; not overwriting it")
    try:
        directory.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise BivocabError(f"{directory}: cannot create directory: {exc.strerror}") from None
    atomic_write_text(target, STARTER_RECIPE)
    click.echo(f"wrote {target}; edit the inputs, then run: bivocab check {target}")


@main.command()
@click.argument("recipe", type=click.Path(dir_okay=False, path_type=Path))
def check(recipe: Path) -> None:
    """Validate RECIPE and its inputs and print the build plan."""
    from .recipe import load_recipe
    from .report import check_inputs, plan_text

    loaded = load_recipe(recipe)
    click.echo(plan_text(loaded, check_inputs(loaded)))
    click.echo("ok: recipe and inputs are valid")


@main.command(name="build")
@click.argument("recipe", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--out", "out", required=True, type=click.Path(path_type=Path), help="Build directory.")
@click.option("--jobs", default=1, show_default=True, type=click.IntRange(min=1),
              help="Cores to use (worker processes and threads); 1 keeps the build on one core.")
@click.option("--force", is_flag=True, help="Replace a directory that holds something else.")
@click.option("--quiet", is_flag=True, help="Print nothing but errors.")
@click.option("--resume", is_flag=True, help="Reuse the hash-checked shards of an interrupted build of the same recipe.")
@click.option("--profile", is_flag=True, help="Print the time spent in each stage (to stderr).")
def build_command(recipe: Path, out: Path, jobs: int, force: bool, quiet: bool, resume: bool, profile: bool) -> None:
    """Build every condition of RECIPE into OUT."""
    if jobs > 1:
        from .processes import start_worker_server

        start_worker_server()   # the workers' modules load while this process loads its own
    from .build import build
    from .progress import BuildMeter
    from .report import input_notes, summary_text

    meter = BuildMeter(bars=not quiet and sys.stderr.isatty())
    try:
        result = build(recipe, out, jobs=jobs, force=force, progress=meter, resume=resume)
    finally:
        meter.close()
    if profile:
        click.echo(meter.profile_text(), err=True)
    if result.was_incomplete and not quiet:
        click.echo(f"note: {out} held an incomplete build (interrupted or failed); it was "
                   + ("resumed" if resume else "rebuilt (--resume would reuse its finished shards)"), err=True)
    if resume and not quiet:
        click.echo(f"resume: reused {len(result.reused_shards)} of {result.total_shards} shards "
                   "(each file checked against its recorded sha256)", err=True)
    if not quiet:
        for note in input_notes(result.manifest):
            click.echo(f"note: {note}", err=True)
        click.echo(summary_text(result))


@main.command(name="probe")
@click.argument("directory", type=click.Path(file_okay=False, path_type=Path))
@click.argument("items", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--ngram", default=DEFAULT_NGRAM, show_default=True, type=click.IntRange(min=1),
              help="Word n-gram length for the contamination check.")
@click.option("--json", "as_json", is_flag=True, help="Print the summary as JSON.")
@click.option("--strict", is_flag=True, help="Exit 1 if an item has an OOV critical word or is contaminated.")
def probe_command(directory: Path, items: Path, ngram: int, as_json: bool, strict: bool) -> None:
    """Encode the test items in ITEMS under every condition of the build in DIRECTORY and check them."""
    import json

    from .errors import CheckFailed
    from .probe import probe, summary_json, summary_text

    result = probe(directory, items, ngram=ngram)
    click.echo(json.dumps(summary_json(result), indent=2, ensure_ascii=False) if as_json else summary_text(result))
    failing = result.failing_items
    if strict and failing:
        raise CheckFailed(f"{items}: {len(failing)} item(s) have an OOV critical word or are contaminated: "
                          f"{', '.join(failing)}")


@main.command()
@click.argument("directory", type=click.Path(path_type=Path))
@click.option("--lexicon", "lexicons", multiple=True, metavar="TAG=FILE",
              help="Word list of one language (one word per line); marks attested homographs. Repeatable.")
@click.option("--translations", type=click.Path(dir_okay=False, path_type=Path),
              help="TSV of word pairs (language A word, language B word) for translation labels.")
@click.option("--top", default=20, show_default=True, type=click.IntRange(min=1),
              help="Rows of the top lists in summary.json and on the terminal.")
@click.option("--json", "as_json", is_flag=True, help="Print summary.json instead of the readable summary.")
@click.option("--quiet", is_flag=True, help="Print nothing but errors and the --json output.")
def audit(directory: Path, lexicons: tuple[str, ...], translations: Path | None, top: int, as_json: bool,
          quiet: bool) -> None:
    """Overlap, homograph and coverage statistics of the build in DIRECTORY, written to DIRECTORY/audit/."""
    from .audit import audit_text, parse_lexicon_options, run_audit
    from .manifest import canonical_json

    show = (lambda stage: click.echo(f"[{stage}]", err=True)) if not quiet and sys.stderr.isatty() else (lambda _: None)
    result = run_audit(directory, parse_lexicon_options(lexicons), translations, top, show)
    if quiet and not as_json:
        return
    click.echo(canonical_json(result.summary) if as_json else audit_text(result), nl=not as_json)


@main.command(name="verify")
@click.argument("directory", type=click.Path(file_okay=False, path_type=Path))
@click.option("--hashes-only", is_flag=True, help="Re-hash the files on disk against build.json; do not rebuild.")
@click.option("--jobs", default=1, show_default=True, type=click.IntRange(min=1), help="Worker processes for the rebuild.")
@click.option("--json", "as_json", is_flag=True, help="Print the report as JSON.")
@click.option("--scratch", type=click.Path(file_okay=False, exists=True, path_type=Path),
              help="Directory for the temporary rebuild (default: the system's temporary directory).")
def verify_command(directory: Path, hashes_only: bool, jobs: int, as_json: bool, scratch: Path | None) -> None:
    """Rebuild DIRECTORY from its build.json and compare every file (exit 1 on any difference)."""
    from .verify import report_json, report_text, verify, verify_or_fail

    report = verify(directory, hashes_only=hashes_only, jobs=jobs, scratch=scratch)
    for warning in report.warnings:
        click.echo(f"warning: {warning}", err=True)
    click.echo(report_json(report) if as_json else report_text(report))
    verify_or_fail(report)


def run() -> None:
    """The ``bivocab`` program: :func:`main`, then the end of the process without the
    interpreter's teardown.  Releasing every loaded module and object one by one costs about
    a quarter of a second, whatever the command did; by now every output file is written,
    synced and closed, so only the exit handlers (the worker server's clean-up) and the
    flushing of stdout and stderr are left to do."""
    try:
        main()
        code = 0
    except SystemExit as exc:
        code = exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 1)
    atexit._run_exitfuncs()
    sys.stdout.flush()
    sys.stderr.flush()
    os._exit(code)


if __name__ == "__main__":
    run()
