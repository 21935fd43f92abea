"""Every diagnostic code loopwise emits: severity, a one-line summary, where it is documented.

Codes are ``LW`` and three digits. The hundreds digit is the stage that finds
the problem (0 reading files, 1 syntax, 2 names and values, 3 the loop graph,
4 the engine, 5 margins and requirements, 6 sweeps, 7 comparisons, 9 internal);
within a stage, a tens digit of 8 marks a warning and 9 a note, every other
tens digit an error. Codes are never reused for something else.

Before release 0.2 the codes were written ``E101``, ``W201``, ``N401``; the
``old`` field keeps that spelling (docs/language.md lists both for one release).
"""
from __future__ import annotations

from dataclasses import dataclass

__all__ = ["Code", "CODES"]

@dataclass(frozen=True)
class Code:
    """One diagnostic: its code, severity, one-line summary and documentation section."""

    code: str
    severity: str  # "error" | "warning" | "note"
    summary: str
    section: str
    old: str | None = None


def _severity(code: str) -> str:
    tens = code[3]
    return "warning" if tens == "8" else "note" if tens == "9" else "error"


_TABLE: tuple[tuple[str, str, str, str | None], ...] = (
    # code, summary, doc section, old code
    ("LW001", "the file cannot be read (missing, a folder, no permission)", "files", "E001"),
    ("LW002", "the file is not UTF-8 text", "files", "E002"),
    ("LW003", "a model not checked because a file it uses has errors", "files", None),
    ("LW010", "the settings file is not valid TOML", "settings", None),
    ("LW011", "an unknown setting in the settings file", "settings", None),
    ("LW012", "a setting of the wrong type, not finite, or out of range", "settings", None),
    ("LW013", "a bad glob in the settings (include, exclude, a waiver's files)", "settings", None),
    ("LW101", "syntax error: unexpected token or character, unclosed quote, reserved word as a name",
     "syntax", "E101"),
    ("LW102", "a missing `*`, or a space between a number and its unit", "syntax", "E102"),
    ("LW103", "malformed number or unknown unit", "syntax", "E103"),
    ("LW104", "not text: NUL bytes, invalid UTF-8, a lone carriage return", "syntax", "E104"),
    ("LW105", "the model is larger than the size limit", "syntax", "E105"),
    ("LW106", "a number that is not finite in SI or underflows to zero", "syntax", "E106"),
    ("LW107", "an expression nested too deeply", "syntax", "E107"),
    ("LW108", "a model (with the files it uses) holds more tokens than the limit", "syntax", None),
    ("LW201", "a reserved word used as a name", "names", "E201"),
    ("LW202", "a name defined twice (or an input that also has an equation)", "names", "E202"),
    ("LW203", "`model` is not the first statement", "names", "E203"),
    ("LW204", "an included file holds more than params, blocks and includes", "includes", "E204"),
    ("LW205", "an include cycle", "includes", "E205"),
    ("LW206", "an included file cannot be found or read", "includes", "E206"),
    ("LW207", "an include that leaves the repository (or the checked folder outside git)", "includes", None),
    ("LW208", "errors in an included file that is not a `.loop` file (its lines are not shown)", "includes",
     None),
    ("LW210", "a constant was expected", "values", "E210"),
    ("LW211", "a param's nominal value lies outside its range", "values", "E211"),
    ("LW212", "a signal equation or application without a signal", "values", "E212"),
    ("LW213", "a transfer function used in a wiring without being applied", "values", "E213"),
    ("LW214", "the Laplace variable `s` outside a transfer", "values", "E214"),
    ("LW215", "a signal inside a transfer or constant", "values", "E215"),
    ("LW216", "a block used as a value", "values", "E216"),
    ("LW217", "a param used before its definition, or whose definition failed", "values", "E217"),
    ("LW218", "an unknown name", "values", "E218"),
    ("LW219", "division by zero, or a power without a finite value", "values", "E219"),
    ("LW220", "an improper block (retired: improper blocks are accepted with LW283; improper loops "
              "are LW403, LW404)", "values", "E220"),
    ("LW221", "a sum with different delays, or another transfer without a rational form", "values", "E221"),
    ("LW222", "a non-linear wiring (product, quotient or power of signals)", "values", "E222"),
    ("LW223", "a bad exponent", "values", "E223"),
    ("LW224", "`exp` outside a transfer", "values", "E224"),
    ("LW225", "a block applied inside a transfer", "values", "E225"),
    ("LW226", "an unknown function", "values", "E226"),
    ("LW227", "an unknown block", "values", "E227"),
    ("LW228", "a block whose definition failed", "values", "E228"),
    ("LW229", "a bracketed transfer outside a signal equation", "values", "E229"),
    ("LW230", "no signal equations where a model needs them", "values", "E230"),
    ("LW231", "`exp(+T*s)`: a prediction, not a delay", "values", "E231"),
    ("LW232", "`exp` used other than as a pure delay", "values", "E232"),
    ("LW233", "a transfer of too high an order (more poles or zeros than the limit)", "values", None),
    ("LW240", "a default requirement in the settings that is not a requirement", "requirements", "E240"),
    ("LW241", "a limit's unit does not fit the metric", "requirements", "E241"),
    ("LW242", "a dB limit from a negative ratio", "requirements", "E242"),
    ("LW243", "an unknown requirement metric", "requirements", "E243"),
    ("LW250", "a waiver names an unknown diagnostic code", "waivers", None),
    ("LW251", "a waiver names a code that cannot be waived (an error)", "waivers", None),
    ("LW252", "a waiver without a reason", "waivers", None),
    ("LW253", "a waiver at a name that is not a break, signal or block of the model", "waivers", None),
    ("LW254", "`--set` names no param of the model", "values", None),
    ("LW281", "a block cancels an unstable (or imaginary-axis) pole with a zero: the mode counts", "values",
     "W201"),
    ("LW282", "a block that is never used", "names", "W202"),
    ("LW283", "an improper block (an ideal derivative): a real implementation needs a filter", "values", None),
    ("LW284", "a waiver that matches no finding", "waivers", None),
    ("LW291", "a constant offset in a signal sum (ignored)", "values", "N201"),
    ("LW292", "a param set (`--set`) outside its declared range: used as set", "values", None),
    ("LW301", "an ill-posed algebraic loop", "structure", "E301"),
    ("LW302", "a break that opens no loop", "structure", "E302"),
    ("LW303", "a break target that does not use the broken signal", "structure", "E303"),
    ("LW304", "a break defined twice", "structure", "E304"),
    ("LW305", "a break at an input", "structure", "E305"),
    ("LW306", "a break at an unknown signal", "structure", "E306"),
    ("LW307", "a requirement on an unknown break", "structure", "E307"),
    ("LW381", "an input that is never used", "structure", "W301"),
    ("LW382", "a loop that no break opens", "structure", "W302"),
    ("LW383", "an inner loop not much faster than the loop around it (cascade separation)",
     "structure", None),
    ("LW384", "a break without `-> target` that cuts wires into several equations, each closing a loop",
     "structure", None),
    ("LW391", "a well-posed algebraic loop", "structure", "N301"),
    ("LW392", "too many loops to list: structural checks covered the first ones", "structure", "N302"),
    ("LW401", "a neutral-type loop (high-frequency gain through delays >= 1)", "engine", "E401"),
    ("LW402", "the Nyquist count could not be certified within the sample budget", "engine", "E402"),
    ("LW403", "an improper closed loop: a loop gain that grows without bound at high frequency", "engine", None),
    ("LW404", "an improper loop transfer at a break", "engine", None),
    ("LW405", "a break whose loop transfer is zero at every frequency (its feedback paths cancel)",
     "engine", None),
    ("LW406", "gains that need a frequency range beyond double precision", "engine", None),
    ("LW481", "a break's count that did not settle cleanly (rounding residual)", "engine", None),
    ("LW482", "the whole-model count did not settle cleanly", "engine", "W402"),
    ("LW483", "poles and zeros span too many decades for double precision", "engine", "W403"),
    ("LW484", "an unstable (or imaginary-axis) block driven by an input only: it counts", "engine", "W404"),
    ("LW485", "sampling could not resolve the curve near a frequency", "engine", None),
    ("LW486", "a break's count disagrees with the whole model's", "engine", None),
    ("LW487", "an unstable mode hidden by a cancellation inside the loop", "engine", None),
    ("LW488", "a closed-loop pole on the imaginary axis hidden by a cancellation between blocks (marginal)",
     "engine", None),
    ("LW489", "an unstable loop that looks closed with positive feedback (L < 0 at low frequency, P = 0)",
     "engine", None),
    ("LW501", "a break whose closed loop is unstable (Z > 0): a verdict, in SARIF at the break line",
     "margins", None),
    ("LW502", "a break whose closed loop has a pole on the imaginary axis (marginal): a verdict",
     "margins", None),
    ("LW503", "a requirement that is not met: a verdict, in SARIF at the require line", "requirements", None),
    ("LW581", "the loop transfer beyond the certified range winds too often to sample fully",
     "margins", None),
    ("LW582", "the gain-margin stretches disagree with the count", "margins", None),
    ("LW491", "a library of params and blocks: nothing to check on its own", "engine", "N401"),
    ("LW601", "a sweep met a plant in the box that could not be analysed", "sweeps", None),
    ("LW602", "a break not stable at some plants of a sweep: a verdict, in SARIF at the break line", "sweeps",
     None),
    ("LW603", "a requirement not met at the worst plant a sweep found: a verdict, in SARIF at the `require` line",
     "sweeps", None),
    ("LW691", "a sweep of a model without ranged params: its nominal point only", "sweeps", None),
    ("LW692", "a sweep's local search stopped at its budget", "sweeps", None),
    ("LW701", "diff: a loop that became unstable (or a new one that is)", "diff", None),
    ("LW702", "diff: a requirement that stopped being met (or a new one that is not)", "diff", None),
    ("LW703", "diff: a margin loss beyond its threshold where it matters", "diff", None),
    ("LW791", "diff: a change in stability or margins that is information, not a regression", "diff", None),
    ("LW900", "an internal error: no verdict was given", "files", "E999"),
)

CODES: dict[str, Code] = {
    code: Code(code, _severity(code), summary, section, old) for code, summary, section, old in _TABLE
}

