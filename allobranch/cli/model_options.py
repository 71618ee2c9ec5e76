"""Options of the exponent's linear predictor (covariates, traits, tree) for ``fit`` and ``compare``.

The same settings can sit in the recipe's ``[model]`` section::

    [model]
    covariates = ["log_parent_size", "generation"]
    covariate_by_taxon = false
    covariate_ref = { log_parent_size = 0.0 }
    traits = "traits.csv"          # one row per taxon; a path relative to the recipe file
    trait = ["log_body_mass"]
    traits_taxon = "species"       # the trait table's taxon column (default "taxon")
    tree = "species.nwk"           # Newick, a length on every branch
    pagel_lambda = "estimate"      # or a number in [0, 1], e.g. 1 for Brownian motion along the tree

Options given on the command line override the recipe.
"""

from __future__ import annotations

import argparse
import tomllib
from pathlib import Path
from typing import Any

from allobranch.errors import Problem, RecipeError
from allobranch.model.linear import LOG_PARENT_READING, LOG_PARENT_SIZE

#: Covariates computed by allobranch (no column needed).
BUILT_IN_COVARIATES: tuple[str, ...] = (LOG_PARENT_SIZE, LOG_PARENT_READING)
#: Keys of the recipe's [model] section and their expected TOML types.
MODEL_KEYS: dict[str, tuple[type | tuple[type, ...], str]] = {
    "covariates": (list, 'a list of names, e.g. ["log_parent_size"]'),
    "covariate_by_taxon": (bool, "true or false"),
    "covariate_ref": (dict, "a table of numbers, e.g. { log_parent_size = 0.0 }"),
    "traits": (str, "a file name in quotes"),
    "trait": (list, 'a list of column names, e.g. ["log_body_mass"]'),
    "traits_taxon": (str, "a column name in quotes"),
    "tree": (str, "a file name in quotes"),
    "pagel_lambda": ((str, int, float), '"estimate" or a number in [0, 1]'),
}
#: Word that asks for Pagel's lambda to be estimated.
ESTIMATE = "estimate"


def _option_error(message: str, hint: str) -> RecipeError:
    return RecipeError([Problem("fatal", "<options>", None, None, message, hint, "bad_option")])


def _recipe_error(path: Path, message: str, hint: str) -> Problem:
    return Problem("fatal", str(path), None, None, message, hint, "bad_recipe")


def _names(text: str | None) -> list[str]:
    return [v.strip() for v in (text or "").split(",") if v.strip()]


def pagel_lambda_value(text: str | float) -> float | None:
    """``estimate`` (``None``) or a number in [0, 1] (``argparse`` type of ``--pagel-lambda``)."""
    if isinstance(text, str) and text.strip().lower() == ESTIMATE:
        return None
    try:
        value = float(text)
    except (TypeError, ValueError):
        value = float("nan")
    if not 0.0 <= value <= 1.0:  # also refuses NaN
        raise argparse.ArgumentTypeError(f"expected {ESTIMATE!r} or a number in [0, 1]; got {text!r}")
    return value


def _ref(text: str) -> tuple[str, float]:
    name, sep, value = text.partition("=")
    try:
        if not sep:
            raise ValueError
        return name.strip(), float(value)
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"expected NAME=VALUE, e.g. log_parent_size=0; got {text!r}"
        ) from None


def add_comparative_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the covariate, trait and tree options."""
    g = parser.add_argument_group(
        "exponent as a regression",
        "Let the exponent change with junction covariates and taxon traits, and let taxa share ancestry. "
        "Also settable in the recipe's [model] section.",
    )
    g.add_argument(
        "--covariate",
        metavar="NAME[,NAME]",
        help=f"junction covariates: numeric columns of TABLE (e.g. generation) or the built-in "
        f"{LOG_PARENT_SIZE} (log10 parent size, from its daughters) / {LOG_PARENT_READING}",
    )
    g.add_argument(
        "--covariate-by-taxon",
        action="store_true",
        default=None,
        help="let each covariate's slope vary by taxon about an overall slope",
    )
    g.add_argument(
        "--covariate-ref",
        metavar="NAME=VALUE",
        type=_ref,
        action="append",
        help="covariate value at which exponents are reported (default: its mean); repeatable",
    )
    g.add_argument("--traits", metavar="FILE", help="table of taxon traits, one row per taxon")
    g.add_argument("--trait", metavar="COL[,COL]", help="trait columns of --traits acting on taxon exponents")
    g.add_argument(
        "--traits-taxon", metavar="COL", help="taxon column of the --traits table (default: taxon)"
    )
    g.add_argument(
        "--tree",
        metavar="FILE.nwk",
        help="Newick tree of the taxa (a length on every branch): taxon exponents correlated by shared "
        "ancestry, Pagel's lambda estimated",
    )
    g.add_argument(
        "--pagel-lambda",
        metavar="estimate|VALUE",
        type=pagel_lambda_value,
        default=argparse.SUPPRESS,
        help="under --tree: estimate Pagel's lambda (default) or fix it at VALUE in [0, 1] (1: Brownian "
        "motion, a check when few taxa leave lambda poorly determined)",
    )


def recipe_model_options(recipe: str | None) -> dict[str, Any]:
    """The ``[model]`` section of a recipe, checked; paths made relative to the recipe's folder."""
    if not recipe:
        return {}
    path = Path(recipe)
    try:
        doc = tomllib.loads(path.read_text(encoding="utf-8"))
    except (OSError, tomllib.TOMLDecodeError):
        return {}  # the mapping reader reports unreadable recipes
    section = doc.get("model", {})
    problems = []
    if not isinstance(section, dict):
        section = {}
        problems.append(_recipe_error(path, "[model] must be a section", "write [model] on its own line"))
    for key, value in section.items():
        if key not in MODEL_KEYS:
            problems.append(
                _recipe_error(path, f"[model] {key}: unknown key", f"allowed keys: {', '.join(MODEL_KEYS)}")
            )
        elif not isinstance(value, MODEL_KEYS[key][0]):
            problems.append(
                _recipe_error(path, f"[model] {key}: expected {MODEL_KEYS[key][1]}", "correct the value")
            )
    if isinstance(section.get("pagel_lambda"), (str, int, float)):
        try:
            pagel_lambda_value(section["pagel_lambda"])
        except argparse.ArgumentTypeError as err:
            problems.append(_recipe_error(path, f"[model] pagel_lambda: {err}", "correct the value"))
    if problems:
        raise RecipeError(problems)
    out = dict(section)
    for key in ("traits", "tree"):
        if key in out and not Path(out[key]).is_absolute() and (path.parent / out[key]).exists():
            out[key] = str((path.parent / out[key]).resolve())
    return out


def model_settings(args: argparse.Namespace) -> dict[str, Any]:
    """Covariates, traits and tree from the recipe's [model] section with the command-line options over it."""
    rec = recipe_model_options(getattr(args, "recipe", None))
    out = {
        "covariates": _names(args.covariate) if args.covariate else list(rec.get("covariates", [])),
        "covariate_by_taxon": bool(
            args.covariate_by_taxon
            if args.covariate_by_taxon is not None
            else rec.get("covariate_by_taxon", False)
        ),
        "covariate_ref": {
            **{k: float(v) for k, v in rec.get("covariate_ref", {}).items()},
            **dict(args.covariate_ref or []),
        },
        "traits": args.traits or rec.get("traits"),
        "trait": _names(args.trait) if args.trait else list(rec.get("trait", [])),
        "traits_taxon": args.traits_taxon or rec.get("traits_taxon", "taxon"),
        "tree": args.tree or rec.get("tree"),
        "pagel_lambda": (
            args.pagel_lambda
            if hasattr(args, "pagel_lambda")
            else pagel_lambda_value(rec.get("pagel_lambda", ESTIMATE))
        ),
    }
    if out["pagel_lambda"] is not None and not out["tree"]:
        raise _option_error(
            "--pagel-lambda given without --tree FILE.nwk",
            "name the tree with --tree, or drop --pagel-lambda",
        )
    if out["trait"] and not out["traits"]:
        raise _option_error("--trait given without --traits FILE", "name the trait table with --traits")
    if out["traits"] and not out["trait"]:
        raise _option_error(
            "--traits given without --trait COL", "name the trait column(s) to use with --trait"
        )
    return out


def covariate_columns(args: argparse.Namespace) -> list[str]:
    """The covariates that are columns of the table (every named covariate but the built-in ones)."""
    if not hasattr(args, "covariate"):
        return []
    return [c for c in model_settings(args)["covariates"] if c not in BUILT_IN_COVARIATES]


def comparative_table(args: argparse.Namespace, table):
    """``table`` with the trait table and the tree the options name attached."""
    from allobranch.comparative import attach_traits, attach_tree

    s = model_settings(args)
    if s["traits"]:
        table = attach_traits(table, s["traits"], s["trait"], taxon_column=s["traits_taxon"])
    if s["tree"]:
        table = attach_tree(table, s["tree"])
    return table


def spec_fields(args: argparse.Namespace) -> dict[str, Any]:
    """The :class:`~allobranch.model.spec.ModelSpec` fields the options set."""
    s = model_settings(args)
    unknown = set(s["covariate_ref"]) - set(s["covariates"])
    if unknown:
        raise _option_error(
            f"--covariate-ref names {', '.join(sorted(unknown))}, which is not a --covariate",
            "add it to --covariate or drop the reference",
        )
    return {
        "covariates": tuple(s["covariates"]),
        "covariates_by_taxon": s["covariate_by_taxon"],
        "covariate_ref": s["covariate_ref"],
        "traits": tuple(s["trait"]),
        "pagel_lambda": s["pagel_lambda"],
    }
