"""``lensdelay check``: validate a scenario and its model without running anything."""

from __future__ import annotations

from lensdelay.cli.options import Once

__all__ = ["run", "register"]


def run(args) -> int:
    """Validate the scenario and print one line about it."""
    from lensdelay.api import check_scenario

    res = check_scenario(args.scenario, args.model)
    sc, like = res["scenario"], res["likelihood"]
    members = sc.model.members
    with_members = f" + {len(members.ids)} member galaxies" if members is not None else ""
    print(
        f"{args.scenario}: ok — scenario {sc.name!r}, {len(sc.families)} famil"
        f"{'y' if len(sc.families) == 1 else 'ies'}, {sc.n_images} images, model "
        f"{sc.model.label!r}{with_members} with {like.n_parameters} free parameters for "
        f"{like.n_constraints} constraints (dof = {like.dof})"
    )
    return 0


def register(sub) -> None:
    """Add the ``check`` sub-command to the parser."""
    p = sub.add_parser("check", help="validate a scenario without running anything")
    p.add_argument("scenario", help="scenario TOML file")
    p.add_argument("--model", action=Once, help="model TOML replacing the scenario's mass model")
    p.set_defaults(func=run)
