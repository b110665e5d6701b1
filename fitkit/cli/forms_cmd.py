"""`fitkit forms`: list the behavioural step-response forms fitkit can fit."""

from __future__ import annotations

import json

import click


def _with_unit(name: str, unit: str) -> str:
    return f"{name} [{unit}]" if unit else name


def automatic_condition(name: str) -> str:
    """When the automatic choice tries a form: always (''), or the condition in words."""
    from ..fitting import selection
    if name in selection.RETURNING_CANDIDATES:
        return " when the response returns to its baseline" + (
            " and no drive channel is recorded" if name in selection.IDEAL_DRIVE_ONLY else "")
    if name in selection.UNDERSHOOT_CANDIDATES:
        return " when the response first moves the wrong way"
    return ""


def forms_text(descriptions: list[dict], common: list[dict], delay_suffix: str = "") -> str:
    """The forms as a plain-text listing (our own layout); with ``delay_suffix``, a closing
    line on the dead-time variant every form has."""
    from ..fitting.selection import FALLBACK_CANDIDATES as fallback

    lines = ["Every form: y(t) = baseline + step * response(t - t0), with "
             + ", ".join(_with_unit(p["name"], p["unit"]) for p in common) + ".", ""]
    for d in descriptions:
        poles = f"{d['poles']} pole" + ("s" if d["poles"] != 1 else "")
        how = ("tried by --form auto" + automatic_condition(d["name"]) if d["automatic"] else
               "tried by --form auto when neither two-real-pole nor underdamped is determined by the data"
               if d["name"] in fallback else "fitted only when named with --form")
        lines.append(f"{d['name']}  ({poles}; {how})")
        lines.append(f"    {d['summary']}")
        for p in d["parameters"]:
            bound = ""
            if "lower" in p:
                bound += f", above {p['lower']:g}"
            if "upper" in p:
                bound += f", below {p['upper']:g}"
            lines.append(f"    parameter  {_with_unit(p['name'], p['unit']):<12} {p['description']}{bound}")
        derived = ", ".join(_with_unit(q["name"], q["unit"]) for q in d["derived"])
        lines.append(f"    derived    {derived}")
        lines.append("")
    if delay_suffix:
        lines.append(f"Every form also comes behind a dead time, as NAME{delay_suffix} (one more parameter, "
                     "delay [s]; measurable when the input channel is recorded).")
    return "\n".join(lines).rstrip() + "\n"


@click.command("forms")
@click.argument("name", required=False)
@click.option("--json", "as_json", is_flag=True, help="Print one JSON object instead of text.")
def forms(name, as_json):
    """List the step-response forms (or describe the one called NAME).

    For each form: its name (what --form takes), a one-line summary, its
    shape parameters with units, and the derived quantities reported with it.
    """
    from ..forms import FORMS, PULSE_FORMS, get_form
    from ..forms.catalogue import common_parameters, describe_form
    from ..forms.dead_time import DELAY_SUFFIX

    chosen = [get_form(name)] if name else [*FORMS.values(), *PULSE_FORMS.values()]
    descriptions = [describe_form(f) for f in chosen]
    common = common_parameters()
    if as_json:
        click.echo(json.dumps({"common_parameters": common, "forms": descriptions}, indent=2))
    else:
        click.echo(forms_text(descriptions, common, "" if name else DELAY_SUFFIX), nl=False)
