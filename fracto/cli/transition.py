"""``fracto transition``: fracture-mode fractions (and toughness) against test temperature."""

from __future__ import annotations

import click


def read_images_csv(path: str) -> list[dict]:
    """Rows of an images.csv as dicts: numbers parsed, empty cells ``None``.

    The ``temperature_C`` column must exist; a cell that is not a number may carry a
    unit (``-40C``, ``233K``); anything else in a usable row is an input error.
    """
    import csv
    import math
    from pathlib import Path

    from fracto.errors import FractoInputError
    from fracto.units import parse_temperature_c

    p = Path(path)
    if not p.is_file():
        raise FractoInputError(f"The results file '{path}' does not exist.")
    try:
        with p.open(newline="", encoding="utf-8-sig") as fh:
            reader = csv.DictReader(fh)
            header = reader.fieldnames or []
            raw = list(reader)
    except (UnicodeDecodeError, csv.Error) as exc:
        raise FractoInputError(f"The results file '{path}' is not a readable CSV file.") from exc
    if "temperature_C" not in header:
        raise FractoInputError(
            f"The results file '{path}' has no temperature_C column; "
            "the transition analysis needs the test temperature of every field."
        )
    rows = []
    for i, r in enumerate(raw, start=2):
        row: dict = {}
        for k, v in r.items():
            if k is None:
                continue
            v = (v or "").strip()
            if v == "":
                row[k] = None
                continue
            try:
                row[k] = float(v)
            except ValueError:
                row[k] = v
        t = row.get("temperature_C")
        if isinstance(t, str):
            try:
                row["temperature_C"] = parse_temperature_c(t, what=f"temperature on line {i}")
            except FractoInputError as exc:
                raise FractoInputError(
                    f"Line {i} of '{path}' has an unreadable temperature '{t}'."
                ) from exc
        elif isinstance(t, float) and not math.isfinite(t):
            row["temperature_C"] = None
        if row.get("status") is None and "status" in header:
            row["status"] = ""
        rows.append(row)
    return rows


@click.command("transition")
@click.argument("results", type=click.Path(dir_okay=False))
@click.option(
    "--transition-temperature",
    help="Known transition temperature with unit, e.g. 120C or -50C; estimated when omitted.",
)
@click.option("--seed", default=0, show_default=True, help="Seed of the bootstrap.")
@click.option(
    "--n-boot", default=1000, show_default=True, help="Bootstrap replicates (by specimen)."
)
@click.option("--json", "as_json", is_flag=True, help="Print the JSON document instead.")
@click.option("--out", type=click.Path(dir_okay=False), help="Also write the JSON to this file.")
def command(
    results: str,
    transition_temperature: str | None,
    seed: int,
    n_boot: int,
    as_json: bool,
    out: str | None,
) -> None:
    """Fit mode fractions (and toughness) of RESULTS (an images.csv) against temperature.

    Sigmoid (tanh), peaked (Gaussian) and constant models are fitted to specimen
    means and chosen by AICc; intervals come from a bootstrap over specimens.
    """
    from fracto.campaign.transition import analyse_campaign, format_summary
    from fracto.io.safe import dumps_json, write_json_atomic
    from fracto.units import parse_temperature_c

    t_tr = (
        parse_temperature_c(transition_temperature, what="transition temperature")
        if transition_temperature is not None
        else None
    )
    rows = read_images_csv(results)
    doc = analyse_campaign(rows, transition_temperature_C=t_tr, seed=seed, n_boot=n_boot)
    doc["source"] = {"path": results}
    if out:
        write_json_atomic(out, doc)
    click.echo(dumps_json(doc) if as_json else format_summary(doc))
