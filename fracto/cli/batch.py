"""``fracto batch``: score a whole campaign (manifest or folder) into an output folder."""

from __future__ import annotations

import sys

import click


def _transition_line(tr: dict) -> str:
    t = tr.get("transition_temperature_C")
    if t is None:
        note = tr.get("note") or "it could not be estimated from these data"
        return f"transition temperature: not available ({note})"
    if tr.get("transition_estimated"):
        basis = tr.get("transition_basis")
        if isinstance(basis, dict):
            basis = f"{basis.get('mode')} fraction, {basis.get('model')} fit"
        ci = tr.get("transition_temperature_ci95_C") or tr.get("transition_ci95_C")
        ci_text = ""
        if isinstance(ci, list | tuple) and len(ci) == 2 and None not in ci:
            ci_text = f", 95 % interval [{ci[0]:.1f}, {ci[1]:.1f}] °C"
        return f"transition temperature: {t:.1f} °C (estimated from {basis}{ci_text})"
    return f"transition temperature: {t:.1f} °C (given)"


@click.command("batch")
@click.argument("source", type=click.Path(exists=False))
@click.option(
    "--out",
    "out_dir",
    required=True,
    type=click.Path(file_okay=False),
    help="Output folder (an existing one is resumed into).",
)
@click.option("--jobs", type=int, default=1, show_default=True, help="Local worker processes.")
@click.option("--scheduler", help="Dask scheduler address, e.g. tcp://host:8786.")
@click.option(
    "--model",
    "model_path",
    type=click.Path(dir_okay=False),
    help="Mode model file (.skops); default: fracto's default model.",
)
@click.option(
    "--height-model",
    "height_model_path",
    type=click.Path(dir_okay=False),
    help="Height model (.skops) for height maps without an SEM image; default: fracto's "
    "height model.",
)
@click.option("--trust", is_flag=True, help="Load a model holding types fracto does not expect.")
@click.option(
    "--transition-temperature",
    help="Known transition temperature, e.g. 120C; default: estimated from the data.",
)
@click.option("--no-report", is_flag=True, help="Do not write report.html.")
@click.option("--seed", type=int, default=0, show_default=True, help="Seed of the bootstraps.")
@click.option(
    "--n-boot",
    type=int,
    default=1000,
    show_default=True,
    help="Bootstrap replicates of each field's fraction interval.",
)
@click.option("--quiet", is_flag=True, help="No progress bar.")
def command(
    source,
    out_dir,
    jobs,
    scheduler,
    model_path,
    height_model_path,
    trust,
    transition_temperature,
    no_report,
    seed,
    n_boot,
    quiet,
) -> None:
    """Score every SEM image and height map of SOURCE (a manifest CSV or a folder).

    Writes images.csv, specimens.csv, provenance.json, transition.json, overlays/
    and report.html into --out, keeping every result in results.sqlite so that a
    re-run skips what is done and an interrupted run resumes.
    """
    from pathlib import Path

    from fracto import CAUTION
    from fracto.campaign.batch import run_batch
    from fracto.errors import FractoInputError
    from fracto.units import parse_temperature_c

    if not Path(source).exists():
        raise FractoInputError(f"The manifest or folder '{source}' does not exist.")
    t_tr = None
    if transition_temperature is not None:
        t_tr = parse_temperature_c(transition_temperature, what="transition temperature")
    if n_boot < 1:
        raise FractoInputError(f"--n-boot must be at least 1, not {n_boot}.")

    bar = {"obj": None}

    def progress(done: int, total: int, name: str) -> None:
        if quiet:
            return
        if bar["obj"] is None:
            bar["obj"] = click.progressbar(
                length=total, label="scoring", file=sys.stderr, show_pos=True, show_eta=True
            )
            bar["obj"].__enter__()
        bar["obj"].update(1)
        if done == total:
            bar["obj"].__exit__(None, None, None)
            bar["obj"] = None

    try:
        s = run_batch(
            source,
            out_dir,
            jobs=jobs,
            scheduler=scheduler,
            model_path=model_path,
            height_model_path=height_model_path,
            trust=trust,
            transition_temperature_C=t_tr,
            report=not no_report,
            seed=seed,
            n_boot=n_boot,
            progress=progress,
        )
    except KeyboardInterrupt:
        if bar["obj"] is not None:
            bar["obj"].__exit__(None, None, None)
        click.echo(
            f"batch interrupted; every result finished so far is stored in {out_dir}; "
            "run the same command again to resume.",
            err=True,
        )
        raise
    for m in s.messages:
        click.echo(m, err=True)
    click.echo(s.line())
    if s.transition is not None:
        click.echo(_transition_line(s.transition))
    for name, p in s.outputs.items():
        click.echo(f"{name}: {p}")
    click.echo(CAUTION)
