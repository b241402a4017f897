"""User-defined observables: named Pauli strings and real Pauli sums (docs/formats.md, "Observables").

Three ways to name one (character positions and qubit numbers as in
docs/design.md section 2; qubit q is qubit q of the shadow):

- text ``"name=Z0 Z1 Z2 Z3"``: a product of Pauli letters X, Y, Z, each
  followed by its qubit, separated by spaces or ``*``;
- text ``"name=0.5*X0 X1 + 0.5*Y0 Y1 - 1"``: a sum of such products, each
  with an optional real coefficient (a bare number is a constant);
- a TOML file of ``[[observable]]`` tables, each with a ``name`` and either
  an ``expression`` in the text form or a list of ``terms``
  ``{pauli = "ZZZZ", on = [0, 1, 2, 3], coefficient = 1.0}``.

An :class:`Observable` does not know the number of qubits; its
:meth:`Observable.expansion` builds the
:class:`hamiltonians.pauli.PauliExpansion` for a shadow and checks the
qubits. Every mistake is an :class:`manybody.errors.InputError` of one
sentence naming the observable and what is allowed. User text is parsed,
never evaluated.
"""

from __future__ import annotations

import math
import re
import tomllib
from dataclasses import dataclass

import numpy as np

from hamiltonians.pauli import PauliExpansion
from manybody.errors import InputError

ARGUMENT = "observables"
_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_.\-]*\Z")
_TOKEN = re.compile(r"\s*(?:(?P<number>(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)|(?P<factor>[XYZ]\d+)"
                    r"|(?P<op>[+\-*]))")
_FORMS = ("write a product of Pauli letters X, Y, Z with qubit numbers, such as 'Z0 Z1 Z2', or a sum of "
          "such products with real coefficients, such as '0.5*X0 X1 + 0.5*Y0 Y1'")
ENTRY_KEYS = ("name", "expression", "terms", "description")
TERM_KEYS = ("pauli", "on", "coefficient")


@dataclass(frozen=True)
class Observable:
    """A named real Pauli sum: terms are (coefficient, ((qubit, letter), ...)), qubits distinct per product."""

    name: str
    terms: tuple[tuple[float, tuple[tuple[int, str], ...]], ...]

    @property
    def expression(self) -> str:
        """The sum written in the text form, e.g. '0.5*X0 X1 + 0.5*Y0 Y1'."""
        parts = []
        for c, factors in self.terms:
            word = " ".join(f"{letter}{q}" for q, letter in factors)
            text = (f"{abs(c):.12g}" if not word else word if abs(c) == 1 else f"{abs(c):.12g}*{word}")
            parts.append(("-" if c < 0 else "+") + " " + text)
        joined = " ".join(parts)
        return joined[2:] if joined.startswith("+ ") else "-" + joined[2:]

    def expansion(self, n_qubits: int) -> PauliExpansion:
        """The Pauli sum on ``n_qubits`` qubits (an InputError when a qubit is outside)."""
        m = len(self.terms)
        xb, zb = np.zeros((m, n_qubits), bool), np.zeros((m, n_qubits), bool)
        for t, (_, factors) in enumerate(self.terms):
            for q, letter in factors:
                if q >= n_qubits:
                    raise InputError(f"{ARGUMENT} {self.name!r}: qubit {q} is outside the shadow's qubits "
                                     f"(0 to {n_qubits - 1})", argument=ARGUMENT)
                xb[t, q], zb[t, q] = letter in "XY", letter in "YZ"
        return PauliExpansion.from_bits(xb, zb, np.array([c for c, _ in self.terms], dtype=complex))


def parse_expression(name: str, text: str, where: str = "") -> Observable:
    """An Observable from the text form of a sum of Pauli products (module docstring)."""
    label = where or f"{ARGUMENT} {name!r}"
    terms, pos, sign = [], 0, 1.0
    coeff, factors, fresh, signed, starred = None, [], True, False, False
    text = text.rstrip()
    if not text:
        raise InputError(f"{label}: the expression is empty; {_FORMS}", argument=ARGUMENT)
    while pos < len(text):
        match = _TOKEN.match(text, pos)
        if match is None:
            raise InputError(f"{label}: cannot read {text[pos:].strip()[:20]!r} (character {pos + 1}); {_FORMS}",
                             argument=ARGUMENT)
        pos = match.end()
        kind = match.lastgroup
        value = match.group(kind)
        if kind == "op" and value in "+-":
            if starred:
                raise InputError(f"{label}: a sign right after '*' (character {pos}); {_FORMS}", argument=ARGUMENT)
            if not fresh:
                terms.append(_term(label, sign, coeff, factors))
                coeff, factors = None, []
            elif terms or signed or coeff is not None:
                raise InputError(f"{label}: a sign where a product was expected (character {pos}); {_FORMS}",
                                 argument=ARGUMENT)
            sign, signed, fresh = (-1.0 if value == "-" else 1.0), True, True
            continue
        if kind == "op":  # '*' between a coefficient and a letter, or between letters
            if starred or (fresh and coeff is None and not factors):
                raise InputError(f"{label}: '*' with nothing before it (character {pos}); {_FORMS}",
                                 argument=ARGUMENT)
            starred = True
            continue
        if kind == "number":
            if coeff is not None or factors:
                raise InputError(f"{label}: one coefficient per product, written first (character {pos}); "
                                 f"{_FORMS}", argument=ARGUMENT)
            coeff = float(value)
        else:
            factors.append((int(value[1:]), value[0]))
        fresh, starred = False, False
    if fresh or starred:
        raise InputError(f"{label}: the expression ends with a sign or '*'; {_FORMS}", argument=ARGUMENT)
    terms.append(_term(label, sign, coeff, factors))
    return Observable(name, tuple(terms))


def _term(label, sign, coeff, factors):
    qubits = [q for q, _ in factors]
    if len(set(qubits)) != len(qubits):
        repeated = next(q for q in qubits if qubits.count(q) > 1)
        raise InputError(f"{label}: qubit {repeated} appears twice in one product; each product names a qubit "
                         "at most once", argument=ARGUMENT)
    value = sign * (1.0 if coeff is None else coeff)
    if not math.isfinite(value):
        raise InputError(f"{label}: the coefficient {coeff} is not a finite number", argument=ARGUMENT)
    return value, tuple(sorted(factors))


def parse_observable(text: str) -> Observable:
    """``"name=expression"`` (module docstring) as an Observable."""
    if not isinstance(text, str) or "=" not in text:
        raise InputError(f"{ARGUMENT} {text!r}: expected 'name=expression', e.g. 'zstring=Z0 Z1 Z2 Z3'",
                         argument=ARGUMENT)
    name, expression = (part.strip() for part in text.split("=", 1))
    _check_name(name, f"{ARGUMENT} {text!r}")
    return parse_expression(name, expression)


def _check_name(name, label):
    if not isinstance(name, str) or not _NAME.match(name):
        raise InputError(f"{label}: the name {name!r} must start with a letter or '_' and hold only letters, "
                         "digits, '_', '-' and '.'", argument=ARGUMENT)


def load_observables(path) -> list[Observable]:
    """The ``[[observable]]`` tables of a TOML file (docs/formats.md, "Observables")."""
    try:
        with open(path, "rb") as handle:
            data = tomllib.load(handle)
    except OSError as exc:
        raise InputError(f"{path}: cannot be read ({exc.strerror or exc})", argument="observables_file") from None
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: not valid TOML ({exc})", argument="observables_file") from None
    extra = [k for k in data if k != "observable"]
    entries = data.get("observable")
    if extra or not isinstance(entries, list) or not entries:
        raise InputError(f"{path}: expected one or more [[observable]] tables and nothing else"
                         + (f" (found {extra[0]!r})" if extra else ""), argument="observables_file")
    out = [_entry(entry, i + 1, path) for i, entry in enumerate(entries)]
    _check_unique(out, str(path))
    return out


def _entry(entry: dict, number: int, path) -> Observable:
    where = f"{path}: observable {number}"
    unknown = [k for k in entry if k not in ENTRY_KEYS]
    if unknown:
        raise InputError(f"{where}: unknown key {unknown[0]!r}; allowed: {', '.join(ENTRY_KEYS)}",
                         argument="observables_file")
    name = entry.get("name")
    _check_name(name, where)
    where = f"{path}: observable {number} ({name!r})"
    if ("expression" in entry) == ("terms" in entry):
        raise InputError(f"{where}: give either 'expression' (text) or 'terms' (a list of tables), not "
                         f"{'both' if 'terms' in entry else 'neither'}", argument="observables_file")
    if "expression" in entry:
        if not isinstance(entry["expression"], str):
            raise InputError(f"{where}: 'expression' must be a string", argument="observables_file")
        return parse_expression(name, entry["expression"], where)
    terms = entry["terms"]
    if not isinstance(terms, list) or not terms or not all(isinstance(t, dict) for t in terms):
        raise InputError(f"{where}: 'terms' must be a non-empty list of tables "
                         "{pauli = \"ZZ\", on = [0, 1], coefficient = 1.0}", argument="observables_file")
    return Observable(name, tuple(_table_term(t, f"{where}, term {k + 1}") for k, t in enumerate(terms)))


def _table_term(term: dict, where: str):
    unknown = [k for k in term if k not in TERM_KEYS]
    if unknown:
        raise InputError(f"{where}: unknown key {unknown[0]!r}; allowed: {', '.join(TERM_KEYS)}",
                         argument="observables_file")
    letters, on = term.get("pauli", ""), term.get("on", [])
    coeff = term.get("coefficient", 1.0)
    if not isinstance(letters, str) or not re.fullmatch(r"[XYZ]*", letters):
        raise InputError(f"{where}: 'pauli' must be a string of the letters X, Y, Z", argument="observables_file")
    if (not isinstance(on, list) or len(on) != len(letters)
            or not all(isinstance(q, int) and not isinstance(q, bool) and q >= 0 for q in on)):
        raise InputError(f"{where}: 'on' must list one qubit number (an integer >= 0) per letter of 'pauli' "
                         f"({len(letters)})", argument="observables_file")
    if isinstance(coeff, bool) or not isinstance(coeff, (int, float)) or not math.isfinite(coeff):
        raise InputError(f"{where}: 'coefficient' must be a finite real number", argument="observables_file")
    return _term(where, 1.0, float(coeff), list(zip(on, letters)))


def _check_unique(observables, where: str):
    names = [o.name for o in observables]
    repeated = [n for n in names if names.count(n) > 1]
    if repeated:
        raise InputError(f"{where}: the observable name {repeated[0]!r} is used twice; names must be distinct",
                         argument=ARGUMENT)


def observables_from(items, n_qubits: int) -> list[tuple[str, PauliExpansion, str]]:
    """(name, Pauli sum, expression) for every observable given.

    ``items``: one or a list of ``"name=expression"`` strings, Observables,
    (name, PauliExpansion or expression) pairs, or a dict name -> PauliExpansion
    or expression. A PauliExpansion must be Hermitian (real coefficients).
    """
    if isinstance(items, (str, Observable)):
        items = [items]
    elif isinstance(items, dict):
        items = list(items.items())
    parsed = []
    for item in items:
        if isinstance(item, str):
            item = parse_observable(item)
        if isinstance(item, tuple) and len(item) == 2 and isinstance(item[1], str):
            _check_name(item[0], f"{ARGUMENT} {item[0]!r}")
            item = parse_expression(item[0], item[1])
        if isinstance(item, Observable):
            parsed.append((item.name, item.expansion(n_qubits), item.expression))
        elif isinstance(item, tuple) and len(item) == 2 and isinstance(item[1], PauliExpansion):
            parsed.append(_given_expansion(item[0], item[1], n_qubits))
        else:
            raise InputError(f"{ARGUMENT}: cannot use {type(item).__name__} {item!r:.40}; allowed: 'name=expression' "
                             "strings, Observable objects or (name, PauliExpansion) pairs", argument=ARGUMENT)
    if not parsed:
        raise InputError(f"{ARGUMENT}: the list is empty; give at least one 'name=expression'", argument=ARGUMENT)
    _check_unique([Observable(name, ()) for name, _, _ in parsed], ARGUMENT)
    return parsed


def _given_expansion(name, op: PauliExpansion, n_qubits: int):
    _check_name(name, f"{ARGUMENT} {name!r}")
    if op.n_qubits != n_qubits:
        raise InputError(f"{ARGUMENT} {name!r}: the Pauli sum acts on {op.n_qubits} qubits but the shadow has "
                         f"{n_qubits}", argument=ARGUMENT)
    if not op.is_hermitian():
        raise InputError(f"{ARGUMENT} {name!r}: the Pauli sum has complex coefficients; an observable needs real "
                         "ones", argument=ARGUMENT)
    op = op.combined()
    return name, PauliExpansion(op.n_qubits, op.x, op.z, op.coeffs.real), " + ".join(
        f"{c.real:.12g}*{s}" for c, s in zip(op.coeffs, op.strings()))
