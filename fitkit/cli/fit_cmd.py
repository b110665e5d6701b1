"""`fitkit fit FILE [OUT_FILE]`: fit a step response and print it with 95 % intervals."""

from __future__ import annotations


import click

from ..units import parse_value
from .arguments import check_distinct_inputs, form_option, name_value_pairs, pop_form, time_option
from .capture_options import CaptureOptions, capture_options
from .output_options import OutputRequest, emit_result, output_options

# -- component values: --circuit / --topology (see fitkit.part_values) -------------------

def circuit_options(f):
    """The options that turn `fitkit fit` into a solve for component values."""
    from ..probes import PROBE_PRESETS
    opts = [
        click.option("--circuit", "circuit_file", metavar="FILE.toml", default=None,
                     help="Circuit file (see docs/circuit-format.md): solve its unknown parts."),
        click.option("--topology", metavar="NAME", default=None,
                     help="A library circuit (see `fitkit circuits`) instead of a file."),
        click.option("--known", multiple=True, metavar="R1=10k,R2=10k",
                     help="Known part values; with --topology, parts not listed are unknown."),
        click.option("--unknown", "unknown_parts", multiple=True, metavar="C1,C2",
                     help="Parts to solve (default: those not given with --known, or marked ? in the file)."),
        click.option("--design-values", multiple=True, metavar="C1=100n,...",
                     help="Design values of unknown parts, to rank several solutions."),
        click.option("--probe", type=click.Choice(sorted(PROBE_PRESETS)), default=None,
                     help="Include this probe's loading at the measured node in the circuit."),
        click.option("--source-resistance", metavar="OHMS", default=None,
                     help="Include the generator's source resistance (usually 50, e.g. --source-resistance 50)."),
    ]
    for opt in reversed(opts):
        f = opt(f)
    return f


class CircuitArgs:
    """The circuit options of one `fitkit fit` call, turned into a Circuit and a fit."""

    def __init__(self, circuit_file, topology, known, unknown_parts, design_values, probe, source_resistance):
        self.circuit_file, self.topology = circuit_file, topology
        self.known, self.known_tolerances = _known_with_tolerances(name_value_pairs(known, "--known"))
        self.unknown = [n.strip() for item in unknown_parts for n in item.split(",") if n.strip()]
        self.design = name_value_pairs(design_values, "--design-values")
        self.probe, self.source_resistance = probe, source_resistance

    @classmethod
    def pop(cls, kwargs: dict) -> "CircuitArgs":
        return cls(*(kwargs.pop(k) for k in ("circuit_file", "topology", "known", "unknown_parts",
                                              "design_values", "probe", "source_resistance")))

    @property
    def wanted(self) -> bool:
        from ..errors import OptionError
        if self.circuit_file and self.topology:
            raise OptionError("--circuit and --topology were both given", hint="give one of them")
        if not (self.circuit_file or self.topology):
            extra = [o for o, v in (("--known", self.known), ("--unknown", self.unknown),
                                    ("--design-values", self.design), ("--probe", self.probe),
                                    ("--source-resistance", self.source_resistance)) if v]
            if extra:
                raise OptionError(f"{extra[0]} needs a circuit", hint="add --circuit FILE.toml or --topology NAME")
            return False
        return True

    def circuit(self):
        from dataclasses import replace
        from ..circuits import load_circuit, probe_chain, topology
        from ..circuits.topologies import apply_part_settings, get_topology
        from ..errors import OptionError
        if self.topology:
            names = get_topology(self.topology).part_names
            base = topology(self.topology)
            unknown = self.unknown or [p.name for p in base.parts
                                       if p.kind != "amplifier" and p.name not in self.known]
            for n in base.parts:
                if n.kind != "amplifier" and n.name not in self.known and n.name not in unknown:
                    raise OptionError(f"part {n.name} of {self.topology} is neither known nor unknown",
                                      hint=f"give its value with --known {n.name}=VALUE or list it in --unknown")
            for n in list(self.known) + unknown:
                if n not in names:
                    raise OptionError(f"{self.topology} has no part {n!r}", hint="its parts are " + ", ".join(names))
            settings = dict(self.known, **{n: "?" for n in unknown})
            circuit = topology(self.topology, **settings)
        else:
            circuit = load_circuit(self.circuit_file)
            if self.known:
                circuit = apply_part_settings(circuit, self.known)
            unknown = self.unknown or [n for n in circuit.unknowns if n not in self.known]
            circuit = circuit.with_unknowns(unknown)
        chain = circuit.chain
        source = None
        if self.source_resistance is not None:
            source = parse_value(self.source_resistance, "Ohm")
            chain = replace(chain, source_resistance=source)
        if self.probe:
            chain = probe_chain(self.probe, chain.source_resistance)
        return circuit.with_chain(chain)

    def fit(self, capture, *, model: str, **kwargs):
        from ..errors import OptionError
        from ..part_values import fit_circuit
        if model != "auto":
            raise OptionError("--form cannot be combined with --circuit or --topology",
                              hint="the circuit decides the response's form; drop --form")
        circuit = self.circuit()
        design = {}
        for n, v in self.design.items():
            design[n] = parse_value(v, circuit.part(n).unit or None)
        tolerances = {n: _relative_tolerance(t, circuit.part(n).unit, self.known[n], n)
                      for n, t in self.known_tolerances.items()}
        return fit_circuit(capture, circuit, design_values=design or None, known_tolerances=tolerances or None,
                           **kwargs)


def _known_with_tolerances(pairs: dict[str, str]) -> tuple[dict[str, str], dict[str, str]]:
    """Split "76.72+-1%" into the value "76.72" and the tolerance "1%" (also "±")."""
    values, tolerances = {}, {}
    for name, text in pairs.items():
        value, sep, tol = text.replace("±", "+-").partition("+-")
        values[name] = value.strip() if sep else text
        if sep:
            tolerances[name] = tol.strip()
    return values, tolerances


def _relative_tolerance(text: str, unit: str, value_text: str, name: str) -> float:
    """A tolerance as a fraction of the value: "1%" -> 0.01, "0.5" (absolute, part's unit) -> 0.5/value."""
    from ..errors import OptionError
    hint = f"write --known {name}=VALUE+-1% (percent) or +-ABSOLUTE in the part's unit"
    try:
        if text.endswith("%"):
            frac = float(text[:-1]) / 100
        else:
            frac = parse_value(text, unit or None) / parse_value(value_text, unit or None)
    except (ValueError, ZeroDivisionError, OptionError):
        raise OptionError(f"--known {name}: cannot read the tolerance {text!r}", hint=hint) from None
    if not (0 < frac < 1):
        raise OptionError(f"--known {name}: tolerance {text!r} must be above 0 and below 100 %", hint=hint)
    return frac


@click.command("fit")
@click.argument("file", type=click.Path())
@click.argument("out_file", required=False, type=click.Path())
@capture_options
@form_option("Form to fit (see `fitkit forms`), or auto to choose among the usual ones.")
@click.option("--edge-time", metavar="SECONDS", default=None,
              help="Fit only the edge at this time (e.g. 12.5u).")
@click.option("--average", is_flag=True,
              help="Average the edges coherently before fitting (every edge is fitted jointly instead, and "
                   "said so, when the average's own alignment would bias the result).")
@click.option("--pulse-width", metavar="SECONDS", default=None,
              help="The drive is rectangular pulses of this width (e.g. 20u): both edges of a pulse are "
                   "fitted as one response.")
@click.option("--intervals", type=click.Choice(["auto", "covariance", "profile"]), default="auto",
              show_default=True, help="How 95 % intervals of the shape parameters are found.")
@click.option("--noise-record", metavar="FILE", default=None, type=click.Path(),
              help="A capture of the output channel's noise alone (circuit quiet, same scope settings): "
                   "its noise model is used to fit under band-limited noise.")
@click.option("--json", "as_json", is_flag=True, help="Print the result as one JSON object.")
@output_options
@circuit_options
def fit(file: str, out_file: str | None, edge_time: str | None, average: bool,
        pulse_width: str | None, intervals: str, noise_record: str | None, as_json: bool, **kwargs) -> None:
    """Fit the step response in FILE: time constants, f0, Q and gain with 95 % intervals.

    With OUT_FILE, FILE holds the input (drive) and OUT_FILE the output.
    When an input channel is present the model is driven by the measured input.
    """
    from ..fitting import fit_capture

    outputs = OutputRequest.pop(kwargs)
    outputs.validate([file, out_file, kwargs.get("circuit_file"), noise_record], as_json=as_json)
    options = CaptureOptions.pop(kwargs)
    options.validate()
    model = pop_form(kwargs)
    check_distinct_inputs(file, out_file)
    t_edge = time_option(edge_time, "--edge-time")
    width = time_option(pulse_width, "--pulse-width")
    if width is not None and not width > 0:
        from ..errors import OptionError
        raise OptionError(f"--pulse-width must be a positive time, not {pulse_width!r}", hint="for example 20u")
    circuit_args = CircuitArgs.pop(kwargs)
    circuit_args.wanted  # refuses circuit options without a circuit, before any work
    capture = options.load(file, out_file)
    # the library decides the roles it was not told (and tries others when they fail)
    inp, out = options.input_channel, options.output_channel
    noise = None
    if noise_record is not None:
        from ..errors import OptionError
        from ..fitting.noise_record import noise_record_from_capture
        if circuit_args.wanted:
            raise OptionError("--noise-record cannot be combined with --circuit or --topology",
                              hint="fit the form with the noise record, or the circuit without it")
        noise = noise_record_from_capture(options.load(noise_record), options.roles(capture)[1])
    if circuit_args.wanted:
        if width is not None:
            from ..errors import OptionError
            raise OptionError("--pulse-width cannot be combined with --circuit or --topology",
                              hint="fit a form with the pulse width, or record the drive channel")
        result = circuit_args.fit(capture, model=model, input=inp, output=out, edge_time=t_edge,
                                  average=average, intervals=intervals)
    else:
        result = fit_capture(capture, model=model, input=inp, output=out, edge_time=t_edge,
                             average=average, intervals=intervals, noise_record=noise, pulse_width=width)
    emit_result(outputs, result, capture, as_json)
    if not result.describes_data:
        from .. import exitcodes
        click.echo(f"fitkit: {result.file or file}: {not_described_line(result)}", err=True)
        raise click.exceptions.Exit(exitcodes.NOT_DESCRIBED)


def not_described_line(result) -> str:
    """One line for stderr when the best fit does not describe the capture: the finding and the fix."""
    adequacy = result.adequacy
    fixes = "; ".join(adequacy.fixes)
    advice = (f"what would work: {fixes}" if fixes else
              "no form, channel or window fitkit tried describes it: choose the channels with --input/--output, "
              "one edge with --edge-time, or another form with --form (see `fitkit forms`)")
    return f"{adequacy.finding}. {advice}"
