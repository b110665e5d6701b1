"""Checks of command-line arguments made before any work (each a usage error, exit status 2).

Option values that no capture, form or run can have are refused here with one
line naming the option, so the engine never sees them.
"""

from __future__ import annotations

from ..errors import OptionError
from ..units import parse_value


def form_option(help_text: str):
    """``--form NAME`` (default auto), with ``--model`` accepted as a hidden older spelling.

    The decorated command receives ``form`` (the alias folded in, see :func:`pop_form`)."""
    import click

    def decorate(f):
        f = click.option("--model", "model_alias", default=None, hidden=True,
                         help="Older spelling of --form.")(f)
        return click.option("--form", "form", default=None, metavar="auto|NAME",
                            help=help_text + "  [default: auto]")(f)
    return decorate


def pop_form(kwargs: dict) -> str:
    """The form asked for by ``--form`` or its older spelling ``--model`` ("auto" when
    neither); both given with different values is a usage error."""
    form, alias = kwargs.pop("form", None), kwargs.pop("model_alias", None)
    if form is not None and alias is not None and form != alias:
        raise OptionError(f"--form {form!r} and --model {alias!r} disagree",
                          hint="give --form only (--model is its older spelling)")
    chosen = form if form is not None else alias if alias is not None else "auto"
    check_model(chosen, "--form" if form is not None or alias is None else "--model")
    return chosen


def check_model(model: str, option: str = "--form") -> None:
    """``auto`` or the name of a known form (NAME-with-delay included, see fitkit.forms.get_form)."""
    from ..forms import DELAY_SUFFIX, FORMS, get_form
    if model == "auto":
        return
    try:
        get_form(model)
    except OptionError:
        raise OptionError(f"{option} {model!r} is not a form fitkit knows",
                          hint="use auto or one of: " + ", ".join(sorted(FORMS))
                               + f" (each also as NAME{DELAY_SUFFIX})") from None


def check_distinct_inputs(file: str, out_file: str | None) -> None:
    """FILE and OUT_FILE (input and output captures) must be two files."""
    from .output_options import same_file
    if out_file is not None and same_file(file, out_file):
        raise OptionError(f"FILE and OUT_FILE are the same file ({file})",
                          hint="give the drive's capture first and the response's second, or one file alone")


def time_option(value: str | None, option: str) -> float | None:
    """A time in seconds from an option such as --edge-time 12.5u (None when not given)."""
    if value is None:
        return None
    try:
        return parse_value(value, "s")
    except OptionError as exc:
        raise OptionError(f"{option}: {exc.message}", hint=exc.hint or "give seconds, e.g. 12.5u") from None


def name_value_pairs(items, option: str) -> dict[str, str]:
    """{name: value text} from repeated NAME=VALUE,NAME=VALUE options; a name given twice is refused."""
    out: dict[str, str] = {}
    for item in items:
        for piece in (x.strip() for x in item.split(",")):
            if not piece:
                continue
            if "=" not in piece:
                raise OptionError(f"{option} {piece!r} is not NAME=VALUE", hint=f"write e.g. {option} R1=10k")
            name, value = (x.strip() for x in piece.split("=", 1))
            if not name or not value:
                raise OptionError(f"{option} {piece!r} is not NAME=VALUE", hint=f"write e.g. {option} R1=10k")
            if name in out:
                raise OptionError(f"{option} gives {name} twice ({out[name]} and {value})",
                                  hint="give each part once")
            out[name] = value
    return out
