"""``fracto synth``: synthetic fracture surfaces with known truth, one or a campaign.

Option syntax
-------------
``--modes intergranular=0.5,transgranular=0.5``
    target area fractions by mode name (intergranular, transgranular, ductile,
    fatigue); they must add up to 1.
``--grain-size 2um`` | ``lognormal:2um,0.3`` | ``bimodal:1um,5um,0.3``
    Poisson–Voronoi grains of mean equivalent-sphere diameter 2 µm; lognormal
    with σ of ln d 0.3; or fine 1 µm and coarse 5 µm grains with a coarse
    volume fraction of 0.3.
``--temperature 20C --transition 120C [--material steel|ceramic]``
    draw the grain modes from the mode model at T − T_t instead of --modes.
``--campaign -60C,-30C,0C,30C [--specimens 2] [--fields 1]``
    write a whole campaign (one folder per specimen and campaign.csv); needs
    --transition.
``--demo``
    write the fictional demo campaign of demo_images/ into OUTDIR.
"""

from __future__ import annotations

import click

from fracto.errors import FractoInputError
from fracto.units import parse_length_um, parse_temperature_c


def parse_modes(text: str) -> dict[str, float]:
    """Read ``intergranular=0.5,transgranular=0.5`` into a dict of fractions."""
    out: dict[str, float] = {}
    for part in str(text).split(","):
        part = part.strip()
        if not part:
            continue
        if "=" not in part:
            raise FractoInputError(
                f"Cannot read the mode fraction '{part}'; write it like 'intergranular=0.5'."
            )
        name, value = (p.strip() for p in part.split("=", 1))
        try:
            out[name.lower()] = float(value.rstrip("%")) / (100.0 if value.endswith("%") else 1.0)
        except ValueError:
            raise FractoInputError(
                f"The fraction of '{name}' must be a number, not '{value}'."
            ) from None
    if not out:
        raise FractoInputError("Give at least one mode fraction, like 'intergranular=1'.")
    return out


def parse_size(text: str) -> int | tuple[int, int]:
    """Read ``1024`` or ``768x1024`` (rows x columns)."""
    t = str(text).lower().replace(" ", "")
    try:
        if "x" in t:
            a, b = t.split("x", 1)
            return int(a), int(b)
        return int(t)
    except ValueError:
        raise FractoInputError(
            f"Cannot read the size '{text}'; write a number of pixels like 1024 or 768x1024."
        ) from None


def parse_temperatures(text: str) -> list[float]:
    """Read ``-60C,-30C,0C`` into °C."""
    temps = [parse_temperature_c(p.strip()) for p in str(text).split(",") if p.strip()]
    if not temps:
        raise FractoInputError("Give the campaign temperatures like '-60C,-30C,0C'.")
    return temps


@click.command("synth")
@click.argument("outdir", type=click.Path(file_okay=False))
@click.option("--modes", help="Target fractions, e.g. intergranular=0.5,transgranular=0.5.")
@click.option(
    "--grain-size",
    default="2um",
    show_default=True,
    help="2um | lognormal:2um,0.3 | bimodal:1um,5um,0.3 (fine, coarse, coarse volume fraction).",
)
@click.option("--temperature", help="Test temperature, e.g. 20C (modes from the mode model).")
@click.option("--transition", help="Transition temperature, e.g. 120C.")
@click.option(
    "--material",
    type=click.Choice(["steel", "ceramic"]),
    default="steel",
    show_default=True,
    help="Mode-model preset: tanh ductile-to-brittle (steel) or intergranular peak (ceramic).",
)
@click.option("--pixel-size", default="0.1um", show_default=True, help="Pixel size with unit.")
@click.option("--size", default="1024", show_default=True, help="Pixels a side, or ROWSxCOLS.")
@click.option("--seed", default=0, show_default=True, type=int, help="Random seed.")
@click.option("--sem-bits", type=click.Choice(["8", "16"]), default="8", show_default=True)
@click.option("--banner/--no-banner", default=False, help="Append an information banner.")
@click.option("--random-render", is_flag=True, help="Randomise every rendering effect.")
@click.option("--shear", default=1.0, show_default=True, help="Dimple elongation (1 = tension).")
@click.option("--striation-spacing", help="Fatigue striation spacing, e.g. 0.4um.")
@click.option("--campaign", "campaign", help="Write a campaign at these temperatures: -60C,0C,…")
@click.option(
    "--specimens", default=2, show_default=True, help="Campaign specimens per temperature."
)
@click.option("--fields", default=1, show_default=True, help="Campaign fields per specimen.")
@click.option("--demo", is_flag=True, help="Write the fictional demo campaign into OUTDIR.")
@click.option("--force", is_flag=True, help="Write into a non-empty OUTDIR.")
def command(
    outdir: str,
    modes: str | None,
    grain_size: str,
    temperature: str | None,
    transition: str | None,
    material: str,
    pixel_size: str,
    size: str,
    seed: int,
    sem_bits: str,
    banner: bool,
    random_render: bool,
    shear: float,
    striation_spacing: str | None,
    campaign: str | None,
    specimens: int,
    fields: int,
    demo: bool,
    force: bool,
) -> None:
    """Write a synthetic fracture surface (height.tif, sem.png, labels.png, grains.tif,
    truth.json) into OUTDIR, or a whole campaign with --campaign or --demo."""
    from dataclasses import replace

    import numpy as np

    from fracto.synth import FractureSettings, GrainSize, ModeModel, RenderSettings
    from fracto.synth.campaign import make_campaign, make_demo
    from fracto.synth.surface import make_surface

    if demo:
        path = make_demo(outdir, force=force, progress=False)
        click.echo(f"wrote the demo campaign: {path} and {path.parent / 'truth.json'}")
        return
    gs = GrainSize.parse(grain_size)
    px = parse_length_um(pixel_size, what="pixel size")
    shape = parse_size(size)
    rs = replace(RenderSettings(), bit_depth=int(sem_bits), banner=banner)
    if random_render:
        rs = replace(RenderSettings.random(np.random.default_rng(seed)), banner=banner)
    if not (shear >= 1.0):
        raise FractoInputError("The dimple elongation --shear must be 1 or more.")
    fs = FractureSettings(shear_elongation=float(shear))
    if striation_spacing is not None:
        fs = replace(
            fs, striation_spacing_um=parse_length_um(striation_spacing, what="striation spacing")
        )
    mm = ModeModel.steel() if material == "steel" else ModeModel.ceramic()
    t_t = parse_temperature_c(transition, what="transition temperature") if transition else None
    if campaign is not None:
        if t_t is None:
            raise FractoInputError("A campaign needs the transition temperature (--transition).")
        if modes or temperature:
            raise FractoInputError("A campaign takes its modes from the mode model; drop --modes.")
        path = make_campaign(
            outdir,
            temperatures_C=parse_temperatures(campaign),
            specimens_per_temperature=specimens,
            fields_per_specimen=fields,
            transition_C=t_t,
            seed=seed,
            size=shape,
            pixel_size_um=px,
            grain_size=gs,
            mode_model=mm,
            render=rs,
            fracture=fs,
            randomize_render=random_render,
            force=force,
        )
        n = sum(1 for _ in open(path, encoding="utf-8")) - 1
        click.echo(f"wrote {n} files listed in {path} and {path.parent / 'truth.json'}")
        return
    if modes and temperature:
        raise FractoInputError("Give either --modes or --temperature, not both.")
    t = parse_temperature_c(temperature) if temperature else None
    if t is not None and t_t is None:
        raise FractoInputError(
            "Give the transition temperature (--transition) with --temperature."
        )
    surf = make_surface(
        size=shape,
        pixel_size_um=px,
        modes=parse_modes(modes) if modes else None,
        grain_size=gs,
        temperature_C=t,
        transition_C=t_t,
        mode_model=mm,
        render=rs,
        fracture=fs,
        seed=seed,
    )
    written = surf.write(outdir, force=force)
    fr = ", ".join(f"{k} {v:.3f}" for k, v in surf.truth["fractions"].items())
    for p in written:
        click.echo(f"wrote {p}")
    click.echo(f"true fractions: {fr}")
