"""The names the commands offer as choices, and each family's settings for help text,
light to import: no numpy, pandas, scikit-learn or pygam.

The families' settings are read from each family module's own `DEFAULTS` (its source, parsed
without running it), so the help cannot drift from what a fit uses;
`tests/test_cli_conventions.py` holds them equal to the imported modules' values.
"""

from __future__ import annotations

import ast
import importlib
import importlib.util
import json
from typing import Any

from glassbox.core.errors import OptionError
from glassbox.fitting.families import FAMILIES

BENCHMARKS = ("trees", "forest")  # glassbox.fitting.benchmarks: the black boxes
__all__ = ["BENCHMARKS", "FAMILIES", "apply_pairs", "family_defaults", "family_options",
           "pair_families", "settings_lines"]


def family_defaults(family: str) -> dict[str, Any]:
    """A family's settings and their defaults: the literal `DEFAULTS = {...}` of its module,
    read from the source; a module whose `DEFAULTS` is not a plain literal is imported."""
    module = f"glassbox.fitting.families.{family}"
    spec = importlib.util.find_spec(module)
    if spec is not None and spec.origin is not None:
        with open(spec.origin, encoding="utf-8") as source:
            tree = ast.parse(source.read(), spec.origin)
        for node in tree.body:
            target = (node.targets[0] if isinstance(node, ast.Assign) and len(node.targets) == 1
                      else node.target if isinstance(node, ast.AnnAssign) else None)
            if isinstance(target, ast.Name) and target.id == "DEFAULTS" and node.value:
                try:
                    return dict(ast.literal_eval(node.value))
                except ValueError:
                    break
    return dict(importlib.import_module(module).DEFAULTS)


def setting_text(value: Any) -> str:
    """A default as it is written after `--option family.NAME=` (JSON, as it is read)."""
    if isinstance(value, tuple):
        value = list(value)
    return json.dumps(value) if not isinstance(value, str) else value


def settings_lines() -> list[str]:
    """One line per family: `family: NAME=DEFAULT, ...` for the help of fit and compare."""
    return [f"{family}: " + ", ".join(f"{name}={setting_text(value)}"
                                      for name, value in family_defaults(family).items())
            for family in FAMILIES]



def family_options(pairs: list[str], families: tuple[str, ...]) -> dict[str, dict[str, Any]]:
    """`--option` values as each family's settings, one rule for fit and compare:
    `FAMILY.NAME=VALUE` sets NAME for that family only; `NAME=VALUE` sets it for every
    family given that takes NAME. VALUE is read as JSON when it parses (12, 0.5, true,
    [1, 2]), else as text. A name no family given takes is refused, naming those they take."""
    options: dict[str, dict[str, Any]] = {family: {} for family in families}
    for pair in pairs:
        key, equals, text = pair.partition("=")
        key = key.strip().replace("-", "_")
        scope, dot, name = key.rpartition(".")
        if not equals or not name:
            raise OptionError(f"--option takes NAME=VALUE or FAMILY.NAME=VALUE, not {pair!r}")
        try:
            value = json.loads(text)
        except json.JSONDecodeError:
            value = text
        if dot and scope not in FAMILIES:
            raise OptionError(f"--option {pair}: no family {scope!r} "
                              f"(known: {', '.join(FAMILIES)})")
        if dot and scope not in families:
            raise OptionError(f"--option {pair}: the family {scope} is not fitted here "
                              f"(fitted: {', '.join(families)})")
        takers = [family for family in ((scope,) if dot else families)
                  if name in family_defaults(family)]
        if not takers:
            taken = "; ".join(f"{family}: {', '.join(family_defaults(family))}"
                              for family in ((scope,) if dot else families))
            raise OptionError(f"--option {pair}: no option {name} for "
                              f"{'family ' + scope if dot else ', '.join(families)} "
                              f"(options: {taken})")
        for family in takers:
            options[family][name] = value
    return options


def pair_families(families: tuple[str, ...] = FAMILIES) -> tuple[str, ...]:
    """The families (of those given) that take a `pairs` setting."""
    return tuple(family for family in families if "pairs" in family_defaults(family))


def apply_pairs(options: dict[str, dict[str, Any]], pairs: int, families: tuple[str, ...],
                *, every: bool) -> None:
    """`--pairs N` into the settings of each family given that takes pairs. With `every`
    (fit) a family that does not take pairs is refused when N > 0; without (compare) the
    others are fitted without pairs, and only none taking pairs is refused."""
    takers = pair_families(families)
    others = [family for family in families if family not in takers]
    if pairs > 0 and (not takers or (every and others)):
        raise OptionError(f"--pairs {pairs}: the {' and '.join(others)} "
                          f"famil{'y does' if len(others) == 1 else 'ies do'} not fit pairwise "
                          f"terms; families that do: {', '.join(pair_families()) or 'none'}")
    for family in takers if pairs > 0 else ():  # 0 is every family's default
        options.setdefault(family, {})["pairs"] = pairs
