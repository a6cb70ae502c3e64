"""The study protocol (``protocol.toml``): what is measured and how it is checked.

Every problem is reported as one sentence naming the file, the key and the line.
"""

from __future__ import annotations

import math
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

from fieldslope.common.errors import ProtocolError

FITNESS_KINDS = ("binary", "count", "continuous")
_NAME = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")
# Column names a protocol may not use for traits or fitness: they carry other meaning.
RESERVED_COLUMNS = frozenset({"date", "observer", "notes"})


@dataclass(frozen=True)
class TraitSpec:
    name: str
    unit: str = ""
    min: float | None = None
    max: float | None = None
    label: str = ""

    def in_range(self, value: float) -> bool:
        lo = -math.inf if self.min is None else self.min
        hi = math.inf if self.max is None else self.max
        return lo <= value <= hi


@dataclass(frozen=True)
class FitnessSpec:
    name: str
    kind: str  # binary | count | continuous | product
    product: tuple[str, ...] = ()
    label: str = ""

    @property
    def is_total(self) -> bool:
        return bool(self.product)


@dataclass(frozen=True)
class Protocol:
    """A parsed, checked protocol. Traits and fitness keep the file's order."""

    path: Path | None
    name: str
    id_col: str
    season_col: str
    groups: tuple[str, ...]
    traits: dict[str, TraitSpec]
    fitness: dict[str, FitnessSpec]
    mother: str | None = None
    father: str | None = None
    outlier_z: float = 4.0
    allowed: dict[str, tuple[str, ...]] = field(default_factory=dict)
    missing_codes: tuple[str, ...] = ("",)
    id_pattern: str | None = None                 # [checks] id_pattern: every ID should match it whole
    seasons: tuple[int, int] | None = None        # [checks] seasons = [first, last]: plausible seasons

    @property
    def trait_names(self) -> tuple[str, ...]:
        return tuple(self.traits)

    @property
    def component_names(self) -> tuple[str, ...]:
        """Measured fitness components (not declared products)."""
        return tuple(n for n, f in self.fitness.items() if not f.is_total)

    @property
    def totals(self) -> dict[str, tuple[str, ...]]:
        return {n: f.product for n, f in self.fitness.items() if f.is_total}

    def earlier_components(self, component: str) -> tuple[str, ...]:
        """The components listed before ``component`` in any total: where one of them is 0 the
        individual never reached this one (a dead animal has no clutch), so its blank is not missing."""
        out: list[str] = []
        for parts in self.totals.values():
            if component in parts:
                out += [p for p in parts[:parts.index(component)] if p not in out]
        return tuple(out)

    @property
    def parent_cols(self) -> tuple[str, ...]:
        return tuple(c for c in (self.mother, self.father) if c)

    @property
    def key_cols(self) -> tuple[str, ...]:
        """Columns that locate an individual in a season and cell."""
        return (self.id_col, self.season_col, *self.groups)


MAX_PROTOCOL_BYTES = 1024 * 1024   # a protocol is a few kB of text; never read more than this


def read_protocol_bytes(path: str | Path) -> bytes:
    """The protocol file's bytes, reading at most ``MAX_PROTOCOL_BYTES`` (+1 to tell it is larger): a device,
    an endless pipe or a huge file given by mistake is refused after 1 MB, never read whole."""
    path = Path(path)
    try:
        with open(path, "rb") as fh:
            data = fh.read(MAX_PROTOCOL_BYTES + 1)
    except FileNotFoundError:
        raise ProtocolError(f"{path}: protocol file not found; give the path of a protocol.toml.") from None
    except IsADirectoryError:
        raise ProtocolError(f"{path}: is a folder; give the path of the protocol.toml file itself.") from None
    except OSError as exc:
        raise ProtocolError(f"{path}: cannot read protocol file ({exc.strerror}).") from None
    if len(data) > MAX_PROTOCOL_BYTES:
        raise ProtocolError(f"{path}: more than {MAX_PROTOCOL_BYTES // 2**20} MB (only that much was read), but a "
                            "protocol is a few kB of text; give the path of the protocol.toml file.")
    return data


def decode_protocol(data: bytes, path: str | Path) -> Protocol:
    """Check protocol bytes (UTF-8, with or without byte-order mark) as ``load_protocol`` does."""
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError:
        raise ProtocolError(f"{path}: protocol file is not UTF-8 text; save it as UTF-8.") from None
    return parse_protocol(text, Path(path))


def load_protocol(path: str | Path) -> Protocol:
    """Read and check ``protocol.toml``; raise :class:`ProtocolError` with file, key and line."""
    return decode_protocol(read_protocol_bytes(path), path)


def parse_protocol(text: str, path: Path | None = None) -> Protocol:
    where = str(path) if path else "protocol"
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ProtocolError(f"{where}: not valid TOML ({exc}); fix the syntax there.") from None
    return _Builder(doc, text, where, path).build()


class _Builder:
    def __init__(self, doc: dict, text: str, where: str, path: Path | None):
        self.doc, self.text, self.where, self.path = doc, text, where, path
        self.lines = text.splitlines()

    # -- error reporting -------------------------------------------------
    def line_of(self, table: str, key: str | None = None) -> int | None:
        """1-based line of ``[table]`` (or of ``key`` inside it), if it can be found."""
        header = re.compile(r"^\s*\[\s*" + r"\s*\.\s*".join(map(re.escape, table.split("."))) + r"\s*\]")
        start = None
        for i, line in enumerate(self.lines):
            if header.match(line):
                start = i
                break
        if start is None:
            # Dotted keys written inline, e.g. ``traits.femur.min = 3``: look for the key anywhere.
            if key is not None:
                pat = re.compile(r"^\s*(?:[\w.\"']+\.)?" + re.escape(key) + r"\s*=")
                for i, line in enumerate(self.lines):
                    if pat.match(line):
                        return i + 1
            return None
        if key is None:
            return start + 1
        pat = re.compile(r"^\s*[\"']?" + re.escape(key) + r"[\"']?\s*=")
        for i in range(start + 1, len(self.lines)):
            if re.match(r"^\s*\[", self.lines[i]):
                break
            if pat.match(self.lines[i]):
                return i + 1
        return start + 1

    def fail(self, table: str, key: str | None, problem: str, fix: str) -> ProtocolError:
        line = self.line_of(table, key)
        full = f"{table}.{key}" if key else f"[{table}]"
        at = f", line {line}" if line else ""
        return ProtocolError(f"{self.where}{at}: {full} {problem}; {fix}.")

    # -- typed getters ---------------------------------------------------
    def table(self, name: str, required: bool = False) -> dict:
        node = self.doc
        for part in name.split("."):
            node = node.get(part, None) if isinstance(node, dict) else None
        if node is None:
            if required:
                raise ProtocolError(f"{self.where}: the [{name}] table is missing; add it (see README, 'protocol file').")
            return {}
        if not isinstance(node, dict):
            raise self.fail(name, None, "must be a table", f"write it as [{name}]")
        return node

    def text_key(self, table: str, tbl: dict, key: str, default: str | None = None) -> str | None:
        value = tbl.get(key, default)
        if value is None:
            return None
        if not isinstance(value, str) or not value.strip():
            raise self.fail(table, key, "must be a non-empty text in quotes", f'write e.g. {key} = "..."')
        return value.strip()

    def number_key(self, table: str, tbl: dict, key: str) -> float | None:
        value = tbl.get(key)
        if value is None:
            return None
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
            raise self.fail(table, key, f"must be a finite number, not {value!r}", f"write e.g. {key} = 1.5")
        return float(value)

    def text_list(self, table: str, tbl: dict, key: str) -> tuple[str, ...]:
        value = tbl.get(key, [])
        if not isinstance(value, list) or not all(isinstance(v, str) and v.strip() for v in value):
            raise self.fail(table, key, "must be a list of texts", f'write e.g. {key} = ["a", "b"]')
        return tuple(v.strip() for v in value)

    # -- the protocol ----------------------------------------------------
    def build(self) -> Protocol:
        study = self.table("study", required=True)
        name = self.text_key("study", study, "name", "") if study.get("name") else ""
        id_col = self.text_key("study", study, "id", "id")
        season_col = self.text_key("study", study, "season", "season")
        groups = self.text_list("study", study, "groups") if "groups" in study else ("site",)

        traits = self.build_traits()
        fitness = self.build_fitness()

        parents = self.table("parents")
        mother = self.text_key("parents", parents, "mother")
        father = self.text_key("parents", parents, "father")

        checks = self.table("checks")
        outlier_z = self.number_key("checks", checks, "outlier_z")
        if outlier_z is None:
            outlier_z = 4.0
        elif outlier_z <= 0:
            raise self.fail("checks", "outlier_z", "must be positive", "a robust z of 3.5 to 5 is common practice")
        missing = self.text_list("checks", checks, "missing") if "missing" in checks else ()
        id_pattern = self.id_pattern(checks)
        seasons = self.season_range(checks)
        allowed_tbl = self.table("checks.allowed")
        allowed = {}
        for col in allowed_tbl:
            allowed[col] = self.text_list("checks.allowed", allowed_tbl, col)

        columns = [id_col, season_col, *groups, *traits, *(f for f in fitness if not fitness[f].product)]
        columns += [c for c in (mother, father) if c]
        seen: dict[str, str] = {}
        for col in columns:
            if col in seen:
                raise ProtocolError(
                    f"{self.where}: column name {col!r} is used twice; give each trait, fitness component, "
                    "group and parent column its own name."
                )
            seen[col] = col
        for col in allowed:
            if col not in columns:
                raise self.fail("checks.allowed", col, "names no column of this protocol",
                                "use the ID, season, a group, or a trait/fitness name")
        return Protocol(
            path=self.path,
            name=name or "",
            id_col=id_col,
            season_col=season_col,
            groups=groups,
            traits=traits,
            fitness=fitness,
            mother=mother,
            father=father,
            outlier_z=outlier_z,
            allowed=allowed,
            missing_codes=("", *missing),
            id_pattern=id_pattern,
            seasons=seasons,
        )

    def id_pattern(self, checks: dict) -> str | None:
        """``[checks] id_pattern``: a regular expression every ID should match whole."""
        pattern = self.text_key("checks", checks, "id_pattern")
        if pattern is None:
            return None
        try:
            re.compile(pattern)
        except re.error as exc:
            raise self.fail("checks", "id_pattern", f"is not a regular expression ({exc})",
                            'write e.g. id_pattern = "[A-Z]{2}[0-9]{2}-[0-9]{4}"') from None
        return pattern

    def season_range(self, checks: dict) -> tuple[int, int] | None:
        """``[checks] seasons = [first, last]``: the plausible seasons (years), both included."""
        value = checks.get("seasons")
        if value is None:
            return None
        if (not isinstance(value, list) or len(value) != 2
                or not all(isinstance(v, int) and not isinstance(v, bool) and 1000 <= v <= 9999 for v in value)):
            raise self.fail("checks", "seasons", f"must be two years, first and last, not {value!r}",
                            "write e.g. seasons = [2020, 2030]")
        if value[0] > value[1]:
            raise self.fail("checks", "seasons", f"runs backwards ({value[0]} after {value[1]})",
                            "write the first season first")
        return value[0], value[1]

    def check_name(self, table: str, name: str) -> None:
        if not _NAME.match(name) or name.lower() in RESERVED_COLUMNS:
            raise self.fail(table, None, f"has an unusable column name {name!r}",
                            "use letters, digits and _ (not date, observer or notes)")

    def build_traits(self) -> dict[str, TraitSpec]:
        tbl = self.table("traits", required=True)
        if not tbl:
            raise ProtocolError(f"{self.where}: [traits] declares no trait; add at least one [traits.NAME] table.")
        out = {}
        for name, spec in tbl.items():
            where = f"traits.{name}"
            if not isinstance(spec, dict):
                raise self.fail("traits", name, "must be a table", f"write it as [traits.{name}]")
            self.check_name(where, name)
            lo, hi = self.number_key(where, spec, "min"), self.number_key(where, spec, "max")
            if lo is not None and hi is not None and lo >= hi:
                raise self.fail(where, "min", f"({lo:g}) is not below max ({hi:g})", "swap or correct the range")
            unknown = set(spec) - {"unit", "min", "max", "label"}
            if unknown:
                key = sorted(unknown)[0]
                raise self.fail(where, key, "is not a trait setting", "use unit, min, max or label")
            out[name] = TraitSpec(
                name=name,
                unit=self.text_key(where, spec, "unit", "") if spec.get("unit") else "",
                min=lo,
                max=hi,
                label=self.text_key(where, spec, "label", "") if spec.get("label") else "",
            )
        return out

    def build_fitness(self) -> dict[str, FitnessSpec]:
        tbl = self.table("fitness", required=True)
        if not tbl:
            raise ProtocolError(f"{self.where}: [fitness] declares no component; add a [fitness.NAME] table.")
        out: dict[str, FitnessSpec] = {}
        for name, spec in tbl.items():
            where = f"fitness.{name}"
            if not isinstance(spec, dict):
                raise self.fail("fitness", name, "must be a table", f"write it as [fitness.{name}]")
            self.check_name(where, name)
            label = self.text_key(where, spec, "label", "") if spec.get("label") else ""
            if "product" in spec:
                parts = self.text_list(where, spec, "product")
                if len(parts) < 2:
                    raise self.fail(where, "product", "needs at least two components", 'e.g. product = ["survived", "pods"]')
                out[name] = FitnessSpec(name=name, kind="product", product=parts, label=label)
                continue
            kind = spec.get("kind")
            if kind not in FITNESS_KINDS:
                raise self.fail(where, "kind", f"is {kind!r}", 'write kind = "binary", "count" or "continuous"')
            out[name] = FitnessSpec(name=name, kind=kind, label=label)
        for name, spec in out.items():
            for part in spec.product:
                if part not in out or out[part].is_total:
                    raise self.fail(f"fitness.{name}", "product", f"names {part!r}, which is not a measured component",
                                    "list components declared with a kind")
        return out
