"""The block map: the engineer's TOML of blocks, resources, limits and what-ifs.

Pure: ``parse_block_map(text)`` turns TOML text into plain frozen dataclasses;
``load_block_map(path)`` only reads the file first. Nothing here solves anything: the
planner turns a ``BlockMap`` into its constraint model. Every mistake a user can make
raises one ``ConfigError`` whose single line names the file, the table and key, what is
wrong and, where there is a fix, a hint::

    blocks.toml: [block.pll] after = ["contct"]: unknown block 'contct' (did you mean 'contact'?)

Contract tables (DESIGN.md); every key is optional unless marked *required*:

- ``[limits]`` ``power_w`` (> 0, per site; left out = no power limit) and ``parallel``
  (integer >= 1, per site; left out = no limit). Our extension: ``touchdown_power_w``
  (> 0: the power of the whole touchdown, every site drawing from the tester's supplies
  together; left out = no such limit; no block may draw more on its own).
- ``[resource.<name>]`` ``count`` (integer >= 1, default 1), ``shared`` (default false:
  each site has its own ``count``; true: one pool for the whole touchdown). A name in
  ``uses`` that no table declares is a per-site resource of count 1; it appears in
  ``BlockMap.resources`` flagged ``implicit`` and ``to_toml`` does not write it.
- ``[block.<name>]`` ``uses`` (resources held while it runs), ``power_w`` (>= 0, default
  0.0, and no more than ``limits.power_w``: a block too big for the power limit could
  never run), ``after`` (blocks that must end before it starts; no cycles), ``pinned``
  (true: it keeps its serial slot and nothing overlaps it). ``unassigned`` is reserved:
  attribution's name for tests that no block claims.

Extensions of our own:

- Assignment rules, for logs without sections, in ``[block.<name>]``: ``tests`` (inclusive
  test-number ranges, ``[[1000, 1999], [5000, 5010]]``; a bare number is a range of one)
  and ``names`` (case-sensitive glob patterns on test names: ``*``, ``?``, ``[seq]``).
  The first matching rule wins, in file order: blocks as written, each block's ranges
  before its patterns (``BlockMap.rules()``, ``BlockMap.assign()``).
- ``[economics]`` ``units_per_year`` (*required*, integer >= 1), ``tester_cost_per_hour``
  (*required*, >= 0, in whatever currency ``currency`` names), ``index_ms`` (>= 0: overrides
  the index time measured from the lot's wall clock), ``currency`` (a label, default "").
- ``[whatif.<name>]`` design changes the planner evaluates, one at a time. Each has
  ``kind`` (*required*), ``change`` ("design" by default, or "program" when the change needs
  only a test-program edit) and ``note`` (free text for the report). By kind:

  - ``broadcast``: ``blocks`` (*required*, >= 2 distinct, unpinned blocks, none of which
    must run after another) and ``overhead_ms`` (*required*, >= 0). The set becomes one
    block taking the longest member's time plus the overhead; it holds every member's
    ``uses`` and waits for every member's ``after``. ``power_w`` of the merged block
    defaults to the members' sum: sharing one scan input does not stop every core
    switching, so the device still draws each core's power at once.
  - ``alternative``: ``block`` (*required*) and ``options`` (*required*, >= 2 tables with
    distinct ``name``): ways to test that block; the planner picks the better. An option's
    ``time_ms``, ``power_w`` and ``uses`` default to the block's measured time, its
    ``power_w`` and its ``uses``.
  - ``extra_instrument``: ``resource`` (*required*, declared or implicit) and ``add``
    (integer >= 1, default 1): that many more of the resource.
"""

from __future__ import annotations

import difflib
import fnmatch
import heapq
import math
import re
import tomllib
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from functools import cached_property
from pathlib import Path
from typing import Any, ClassVar, NamedTuple, NoReturn, TypeAlias

from ..errors import ConfigError

__all__ = ["Alternative", "Block", "BlockMap", "Broadcast", "Economics", "ExtraInstrument",
           "Limits", "Option", "Resource", "Rule", "UNASSIGNED", "WhatIf", "draft_block_map",
           "load_block_map", "parse_block_map"]

UNASSIGNED = "unassigned"   # attribution's block for tests that nothing claims
MAX_TEST_NUM = 2**32 - 1    # TEST_NUM is a U*4
CHANGES = ("design", "program")


# ------------------------------------------------------------------ the data model


@dataclass(frozen=True)
class Limits:
    """Per-site limits, and the touchdown's power; None = no limit."""

    power_w: float | None = None
    parallel: int | None = None
    touchdown_power_w: float | None = None   # all sites together


@dataclass(frozen=True)
class Resource:
    """Something a block holds while it runs. ``shared``: one pool of ``count`` for the
    whole touchdown, else ``count`` per site. ``implicit``: named in ``uses`` only."""

    name: str
    count: int = 1
    shared: bool = False
    implicit: bool = False


@dataclass(frozen=True)
class Block:
    name: str
    uses: tuple[str, ...] = ()
    power_w: float = 0.0
    after: tuple[str, ...] = ()
    pinned: bool = False
    tests: tuple[tuple[int, int], ...] = ()   # assignment rules: inclusive ranges
    names: tuple[str, ...] = ()               # assignment rules: glob patterns


@dataclass(frozen=True)
class Economics:
    units_per_year: int
    tester_cost_per_hour: float
    index_ms: float | None = None   # None: the index time measured from the lot
    currency: str = ""


@dataclass(frozen=True)
class Broadcast:
    """Merge ``blocks`` into one: the longest member's time plus ``overhead_ms``."""

    name: str
    blocks: tuple[str, ...]
    overhead_ms: float
    power_w: float | None = None    # None: the members' sum (every core still switches)
    change: str = "design"
    note: str = ""
    kind: ClassVar[str] = "broadcast"

    def merged_power_w(self, blocks: Mapping[str, Block]) -> float:
        if self.power_w is not None:
            return self.power_w
        return math.fsum(blocks[b].power_w for b in self.blocks)

    def merged_uses(self, blocks: Mapping[str, Block]) -> tuple[str, ...]:
        return tuple(dict.fromkeys(u for b in self.blocks for u in blocks[b].uses))


@dataclass(frozen=True)
class Option:
    """One way to test a block; None = as the block is now (measured time, its map entry)."""

    name: str
    time_ms: float | None = None
    power_w: float | None = None
    uses: tuple[str, ...] | None = None


@dataclass(frozen=True)
class Alternative:
    name: str
    block: str
    options: tuple[Option, ...]
    change: str = "design"
    note: str = ""
    kind: ClassVar[str] = "alternative"


@dataclass(frozen=True)
class ExtraInstrument:
    name: str
    resource: str
    add: int = 1
    change: str = "design"
    note: str = ""
    kind: ClassVar[str] = "extra_instrument"


WhatIf: TypeAlias = Broadcast | Alternative | ExtraInstrument


class Rule(NamedTuple):
    """An assignment rule: kind "tests" uses lo..hi (inclusive), kind "names" a pattern."""

    block: str
    kind: str
    lo: int | None
    hi: int | None
    pattern: str | None


@dataclass(frozen=True)
class BlockMap:
    limits: Limits = field(default_factory=Limits)
    resources: dict[str, Resource] = field(default_factory=dict)
    blocks: dict[str, Block] = field(default_factory=dict)
    economics: Economics | None = None
    whatifs: dict[str, WhatIf] = field(default_factory=dict)
    source: str = field(default="blocks.toml", compare=False)

    def rules(self) -> list[Rule]:
        """Assignment rules in priority order: file order, ranges before patterns."""
        return [rule for b in self.blocks.values() for rule in _block_rules(b)]

    @cached_property
    def _patterns(self) -> dict[str, tuple[re.Pattern[str], ...]]:
        return {n: tuple(re.compile(fnmatch.translate(p)) for p in b.names)
                for n, b in self.blocks.items()}

    def assign(self, test_num: int | None, test_name: str | None) -> str | None:
        """The block of the first rule that matches, or None (attribution: unassigned).
        Same order as ``rules()``: blocks in file order, each one's ranges first."""
        for name, b in self.blocks.items():
            if test_num is not None and any(lo <= test_num <= hi for lo, hi in b.tests):
                return name
            if test_name is not None and any(p.match(test_name) for p in self._patterns[name]):
                return name
        return None

    def topological_order(self) -> list[str]:
        """Blocks so that each comes after everything in its ``after``; ties in file order."""
        return topological({n: b.after for n, b in self.blocks.items()}, self.source)

    def missing(self, measured_blocks: Iterable[str]) -> list[str]:
        """Measured blocks the map does not describe (the planner keeps them serial)."""
        seen = dict.fromkeys(b for b in measured_blocks
                             if b not in self.blocks and b != UNASSIGNED)
        return list(seen)

    def to_toml(self) -> str:
        """The canonical TOML of this map: every value explicit, implicit resources left
        out (they are implied again on reading), no comments."""
        return _write(self)


def _block_rules(b: Block) -> list[Rule]:
    return ([Rule(b.name, "tests", lo, hi, None) for lo, hi in b.tests]
            + [Rule(b.name, "names", None, None, p) for p in b.names])


# ------------------------------------------------------------------ reading


def load_block_map(path: str | Path) -> BlockMap:
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError as e:
        raise ConfigError(f"{p}: not UTF-8 text (byte {e.start}): save the block map as "
                          "UTF-8") from None
    except OSError as e:
        raise ConfigError(f"{p}: cannot read the block map: {e.strerror or e}") from None
    return parse_block_map(text, str(p))


def parse_block_map(text: str, source: str = "blocks.toml") -> BlockMap:
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as e:
        raise ConfigError(f"{source}: not valid TOML: {e}") from None
    return _build(data, source)


_MISSING: Any = object()
_TOP_KEYS = ("limits", "resource", "block", "economics", "whatif")
_LIMIT_KEYS = ("power_w", "parallel", "touchdown_power_w")
_RESOURCE_KEYS = ("count", "shared")
_BLOCK_KEYS = ("uses", "power_w", "after", "pinned", "tests", "names")
_ECONOMICS_KEYS = ("units_per_year", "tester_cost_per_hour", "index_ms", "currency")
_WHATIF_KEYS = {"broadcast": ("blocks", "overhead_ms", "power_w"),
                "alternative": ("block", "options"),
                "extra_instrument": ("resource", "add")}
_COMMON_WHATIF_KEYS = ("kind", "change", "note")
_OPTION_KEYS = ("name", "time_ms", "power_w", "uses")


def _did_you_mean(word: str, known: Iterable[str]) -> str | None:
    close = difflib.get_close_matches(word, list(known), n=1, cutoff=0.6)
    return f"did you mean {close[0]!r}?" if close else None


def _type_name(v: Any) -> str:
    for t, name in ((bool, "a boolean"), (int, "an integer"), (float, "a float"),
                    (str, "a string"), (list, "an array"), (dict, "a table")):
        if isinstance(v, t):
            return name
    return "a date-time"


class _Table:
    """One TOML table being read; it knows where it sits, for the error messages."""

    def __init__(self, src: str, label: str, data: dict[str, Any], known: Sequence[str],
                 prefix: str = ""):
        self.src, self.label, self.data, self.prefix = src, label, data, prefix
        for key in data:
            if key not in known:
                what = "keys" if label else "tables"
                hint = _did_you_mean(key, known) or f"known {what}: {', '.join(known)}"
                if not label and isinstance(data[key], dict):
                    raise ConfigError(f"{src}: [{key}]: unknown table ({hint})")
                self.fail(key, "unknown key", hint)

    def fail(self, key: str | None, what: str, hint: str | None = None) -> NoReturn:
        where = f"[{self.label}]" if self.label else ""
        if key is not None:
            shown = self.prefix + _key(key)
            value = self.data.get(key, _MISSING)
            shown += "" if value is _MISSING else f" = {_render(value)}"
            where = f"{where} {shown}" if where else shown
        tail = f" ({hint})" if hint else ""
        raise ConfigError(f"{self.src}: {where}: {what}{tail}" if where else
                          f"{self.src}: {what}{tail}")

    def get(self, key: str, required: bool, example: str) -> Any:
        if key in self.data:
            return self.data[key]
        if required:
            self.fail(None, f"missing key {self.prefix + key!r}", f"e.g. {key} = {example}")
        return _MISSING

    def number(self, key: str, default: Any = _MISSING, *, required: bool = False,
               positive: bool = False) -> Any:
        v = self.get(key, required, "1.0")
        if v is _MISSING:
            return default
        if isinstance(v, bool) or not isinstance(v, int | float):
            self.fail(key, f"expected a number, found {_type_name(v)}")
        if not math.isfinite(v):
            self.fail(key, "expected a finite number")
        if v < 0:
            self.fail(key, "cannot be negative")
        if positive and v == 0:
            self.fail(key, "must be greater than 0", f"leave {key} out for no limit")
        return float(v)

    def integer(self, key: str, default: Any = _MISSING, *, required: bool = False,
                minimum: int = 1, hint: str | None = None) -> Any:
        v = self.get(key, required, str(minimum))
        if v is _MISSING:
            return default
        if isinstance(v, bool) or not isinstance(v, int):
            self.fail(key, f"expected an integer, found {_type_name(v)}")
        if v < minimum:
            self.fail(key, f"must be at least {minimum}", hint)
        return v

    def boolean(self, key: str, default: bool) -> bool:
        v = self.data.get(key, default)
        if not isinstance(v, bool):
            self.fail(key, f"expected true or false, found {_type_name(v)}")
        return v

    def string(self, key: str, default: Any = _MISSING, *, required: bool = False) -> Any:
        v = self.get(key, required, '"name"')
        if v is _MISSING:
            return default
        if not isinstance(v, str):
            self.fail(key, f"expected a string, found {_type_name(v)}")
        return v

    def names(self, key: str, default: Any = (), *, required: bool = False) -> Any:
        """An array of distinct, non-empty strings, as a tuple."""
        v = self.get(key, required, '["name"]')
        if v is _MISSING:
            return default
        if isinstance(v, str):
            self.fail(key, "expected an array of strings, found a string",
                      f"write {key} = [{_render(v)}]")
        if not isinstance(v, list):
            self.fail(key, f"expected an array of strings, found {_type_name(v)}")
        for item in v:
            if not isinstance(item, str):
                self.fail(key, f"expected an array of strings, found {_type_name(item)} "
                          f"{_render(item)} in it")
            if not item:
                self.fail(key, "an empty name")
            if v.count(item) > 1:
                self.fail(key, f"{item!r} is listed twice", "remove one")
        return tuple(v)

    def table(self, key: str) -> dict[str, Any]:
        v = self.data.get(key, {})
        if not isinstance(v, dict):
            self.fail(key, f"expected a table, found {_type_name(v)}")
        return v

    def subtables(self, key: str) -> list[tuple[str, dict[str, Any]]]:
        """``[key.<name>]`` tables in file order."""
        out = []
        for name, v in self.table(key).items():
            if not isinstance(v, dict):
                _Table(self.src, key, {name: v}, [name]).fail(
                    name, f"expected a table, found {_type_name(v)}",
                    f"write [{key}.{_key(name)}]")
            if not name:
                raise ConfigError(f'{self.src}: [{key}.""]: an empty name')
            out.append((name, v))
        return out


def _build(data: dict[str, Any], src: str) -> BlockMap:
    top = _Table(src, "", data, _TOP_KEYS)
    limits = _limits(_Table(src, "limits", top.table("limits"), _LIMIT_KEYS))
    declared = {name: _resource(_Table(src, f"resource.{_key(name)}", t, _RESOURCE_KEYS), name)
                for name, t in top.subtables("resource")}
    tables = {name: _Table(src, f"block.{_key(name)}", t, _BLOCK_KEYS)
              for name, t in top.subtables("block")}
    blocks = {name: _block(t, name, limits) for name, t in tables.items()}
    _check_after(blocks, tables, src)
    eco = top.table("economics") if "economics" in data else None
    economics = None if eco is None else _economics(_Table(src, "economics", eco,
                                                           _ECONOMICS_KEYS))
    parsed = [_whatif(src, name, t, blocks, limits) for name, t in top.subtables("whatif")]
    resources = dict(declared)
    uses = [u for b in blocks.values() for u in b.uses]
    uses += [u for w, _ in parsed if isinstance(w, Alternative) for o in w.options
             for u in (o.uses or ())]
    for u in uses:
        resources.setdefault(u, Resource(u, implicit=True))
    for w, t in parsed:
        if isinstance(w, ExtraInstrument) and w.resource not in resources:
            t.fail("resource", f"unknown resource {w.resource!r}",
                   _did_you_mean(w.resource, resources) or "declare it in [resource.<name>] "
                   "or name it in a block's uses")
    return BlockMap(limits, resources, blocks, economics, {w.name: w for w, _ in parsed}, src)


def _limits(t: _Table) -> Limits:
    return Limits(t.number("power_w", None, positive=True),
                  t.integer("parallel", None, minimum=1,
                            hint="leave parallel out for no limit"),
                  t.number("touchdown_power_w", None, positive=True))


def _resource(t: _Table, name: str) -> Resource:
    count = t.integer("count", 1, minimum=1,
                      hint=f"a block that needs no {name} should not list it in uses")
    return Resource(name, count, t.boolean("shared", False))


def _block(t: _Table, name: str, limits: Limits) -> Block:
    if name == UNASSIGNED:
        t.fail(None, f"{UNASSIGNED!r} is reserved for tests that no block claims",
               "choose another name")
    power = t.number("power_w", 0.0)
    _check_power(t, "power_w", power, limits)
    return Block(name, t.names("uses"), power, t.names("after"), t.boolean("pinned", False),
                 _ranges(t), t.names("names"))


def _check_power(t: _Table, key: str, power: float | None, limits: Limits, what: str = "",
                 hint: str = "lower it, or raise [limits] power_w") -> None:
    # A tolerance: a sum such as 0.1 + 0.2 must fit a limit of 0.3.
    if power is not None and limits.power_w is not None and power > limits.power_w + 1e-9:
        t.fail(key, f"{what}too big for the power limit of {limits.power_w!r} W per site",
               hint)
    td = limits.touchdown_power_w
    if power is not None and td is not None and power > td + 1e-9:
        t.fail(key, f"{what}too big for the touchdown's power limit of {td!r} W",
               "lower it, or raise [limits] touchdown_power_w")


def _ranges(t: _Table) -> tuple[tuple[int, int], ...]:
    v = t.data.get("tests", [])
    if not isinstance(v, list):
        t.fail("tests", f"expected an array of [lo, hi] ranges, found {_type_name(v)}",
               "e.g. tests = [[1000, 1999]]")
    out = []
    for item in v:
        pair = [item] if isinstance(item, int) and not isinstance(item, bool) else item
        if not (isinstance(pair, list) and len(pair) in (1, 2) and all(
                isinstance(n, int) and not isinstance(n, bool) for n in pair)):
            t.fail("tests", f"{_render(item)} is not a test number or a [lo, hi] range",
                   "e.g. tests = [[1000, 1999], 2500]")
        lo, hi = pair[0], pair[-1]
        if lo > hi:
            t.fail("tests", f"range {_render(item)} has lo > hi", f"write [{hi}, {lo}]")
        if lo < 0 or hi > MAX_TEST_NUM:
            t.fail("tests", f"range {_render(item)} is outside test numbers 0..{MAX_TEST_NUM}")
        out.append((lo, hi))
    return tuple(out)


def _check_after(blocks: dict[str, Block], tables: dict[str, _Table], src: str) -> None:
    for name, b in blocks.items():
        for dep in b.after:
            if dep not in blocks:
                tables[name].fail("after", f"unknown block {dep!r}", _did_you_mean(dep, blocks)
                                  or f"declare [block.{_key(dep)}] or remove it")
    cycle = _find_cycle({n: b.after for n, b in blocks.items()})
    if cycle:
        tables[cycle[0]].fail("after", f"cycle in after: {' -> '.join(cycle)}",
                              "each waits for the next: remove one of these entries")


def _find_cycle(graph: Mapping[str, Sequence[str]]) -> list[str] | None:
    """A cycle as [a, b, ..., a] following the edges, the first met in file order."""
    state: dict[str, int] = {}  # 1 = on the path, 2 = done
    for root in graph:
        if root in state:
            continue
        path, stack = [root], [iter(graph[root])]
        state[root] = 1
        while stack:
            nxt = next(stack[-1], None)
            if nxt is None:
                state[path.pop()] = 2
                stack.pop()
            elif state.get(nxt) == 1:
                return path[path.index(nxt):] + [nxt]
            elif nxt not in state and nxt in graph:
                state[nxt] = 1
                path.append(nxt)
                stack.append(iter(graph[nxt]))
    return None


def topological(graph: Mapping[str, Sequence[str]], src: str) -> list[str]:
    """The nodes of ``graph`` (node -> what it comes after) in dependency order, ties in
    the graph's own order; ConfigError naming ``src`` on a cycle."""
    index = {n: i for i, n in enumerate(graph)}
    waiting = {n: len(set(deps)) for n, deps in graph.items()}
    followers: dict[str, list[str]] = {n: [] for n in graph}
    for n, deps in graph.items():
        for d in set(deps):
            followers[d].append(n)
    ready = [(index[n], n) for n, w in waiting.items() if w == 0]
    heapq.heapify(ready)
    order = []
    while ready:
        _, n = heapq.heappop(ready)
        order.append(n)
        for f in followers[n]:
            waiting[f] -= 1
            if waiting[f] == 0:
                heapq.heappush(ready, (index[f], f))
    if len(order) < len(graph):
        cycle = _find_cycle(graph) or []
        raise ConfigError(f"{src}: [block.{_key(cycle[0])}] after: cycle in after: "
                          f"{' -> '.join(cycle)}")
    return order


def _economics(t: _Table) -> Economics:
    return Economics(t.integer("units_per_year", required=True, minimum=1),
                     t.number("tester_cost_per_hour", required=True),
                     t.number("index_ms", None), t.string("currency", ""))


def _whatif(src: str, name: str, data: dict[str, Any], blocks: dict[str, Block],
            limits: Limits) -> tuple[WhatIf, _Table]:
    label = f"whatif.{_key(name)}"
    kinds = list(_WHATIF_KEYS)
    kind = data.get("kind", _MISSING)
    if not isinstance(kind, str) or kind not in _WHATIF_KEYS:
        head = _Table(src, label, {"kind": kind} if kind is not _MISSING else {}, ["kind"])
        if kind is _MISSING:
            head.fail(None, "missing key 'kind'", f"one of: {', '.join(kinds)}")
        hint = _did_you_mean(kind, kinds) if isinstance(kind, str) else None
        head.fail("kind", "unknown kind", hint or f"one of: {', '.join(kinds)}")
    t = _Table(src, label, data, (*_COMMON_WHATIF_KEYS, *_WHATIF_KEYS[kind]))
    change = t.string("change", "design")
    if change not in CHANGES:
        t.fail("change", "expected \"design\" or \"program\"",
               _did_you_mean(change, CHANGES))
    common = {"name": name, "change": change, "note": t.string("note", "")}
    if kind == "broadcast":
        return _broadcast(t, common, blocks, limits), t
    if kind == "alternative":
        return _alternative(t, common, blocks, limits), t
    return ExtraInstrument(resource=t.string("resource", required=True),
                           add=t.integer("add", 1, minimum=1), **common), t


def _known_block(t: _Table, key: str, name: str, blocks: Mapping[str, Block]) -> None:
    if name not in blocks:
        t.fail(key, f"unknown block {name!r}", _did_you_mean(name, blocks)
               or f"declare [block.{_key(name)}] first")


def _broadcast(t: _Table, common: dict[str, Any], blocks: dict[str, Block],
               limits: Limits) -> Broadcast:
    members = t.names("blocks", required=True)
    if len(members) < 2:
        t.fail("blocks", "a broadcast merges at least two blocks")
    for m in members:
        _known_block(t, "blocks", m, blocks)
        if blocks[m].pinned:
            t.fail("blocks", f"{m!r} is pinned: it keeps its serial slot and cannot be merged")
        for dep in blocks[m].after:
            if dep in members:
                t.fail("blocks", f"{m!r} runs after {dep!r}: blocks that run in order "
                       "cannot be merged")
    w = Broadcast(blocks=members, overhead_ms=t.number("overhead_ms", required=True),
                  power_w=t.number("power_w", None), **common)
    if w.power_w is None:
        _check_power(t, "blocks", w.merged_power_w(blocks), limits,
                     f"the merged block draws {round(w.merged_power_w(blocks), 6)!r} W "
                     "(the members' sum), ",
                     "broadcast fewer blocks, or set power_w if they do not all switch at once")
    _check_power(t, "power_w", w.power_w, limits)
    merged = "+".join(members)
    rep = {n: merged if n in members else n for n in blocks}
    graph: dict[str, list[str]] = {}
    for n, b in blocks.items():
        graph.setdefault(rep[n], []).extend(rep[d] for d in b.after if rep[d] != rep[n])
    cycle = _find_cycle(graph)
    if cycle:
        t.fail("blocks", f"merging them makes a cycle in after: {' -> '.join(cycle)}")
    return w


def _alternative(t: _Table, common: dict[str, Any], blocks: dict[str, Block],
                 limits: Limits) -> Alternative:
    block = t.string("block", required=True)
    _known_block(t, "block", block, blocks)
    raw = t.get("options", True, '[{name = "a"}, {name = "b"}]')
    if not isinstance(raw, list):
        t.fail("options", f"expected an array of tables, found {_type_name(raw)}")
    if len(raw) < 2:
        t.fail("options", "an alternative needs at least two options",
               "one may leave time_ms out: the block as measured")
    options: list[Option] = []
    for i, item in enumerate(raw):
        if not isinstance(item, dict):
            t.fail("options", f"options[{i}] is {_type_name(item)}, expected a table")
        o = _Table(t.src, t.label, item, _OPTION_KEYS, prefix=f"options[{i}].")
        opt = Option(o.string("name", required=True), o.number("time_ms", None),
                     o.number("power_w", None), o.names("uses", None))
        if not opt.name:
            o.fail("name", "an empty name")
        if any(p.name == opt.name for p in options):
            o.fail("name", f"option {opt.name!r} is listed twice", "give each a name")
        _check_power(o, "power_w", opt.power_w, limits)
        options.append(opt)
    return Alternative(block=block, options=tuple(options), **common)


# ------------------------------------------------------------------ writing


_BARE_KEY = re.compile(r"[A-Za-z0-9_-]+")
_ESCAPES = {'"': '\\"', "\\": "\\\\", "\n": "\\n", "\t": "\\t", "\r": "\\r", "\b": "\\b",
            "\f": "\\f"}


def _str(s: str) -> str:
    out = (_ESCAPES.get(c) or (f"\\u{ord(c):04x}" if ord(c) < 0x20 or ord(c) == 0x7F else c)
           for c in s)
    return '"' + "".join(out) + '"'


def _key(k: str) -> str:
    return k if _BARE_KEY.fullmatch(k) else _str(k)


def _value(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int | float):
        return repr(v)
    if isinstance(v, str):
        return _str(v)
    if isinstance(v, list | tuple):
        return "[" + ", ".join(_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{_key(k)} = {_value(x)}" for k, x in v.items()) + " }"
    return str(v)  # date-times: only ever shown in an error


def _render(v: Any, limit: int = 60) -> str:
    s = _value(v)
    return s if len(s) <= limit else s[:limit - 3] + "..."


class _Multiline(list):  # type: ignore[type-arg]
    """An array written one item a line (the options of an alternative)."""


def _field(v: Any) -> str:
    if isinstance(v, _Multiline):
        return "[\n" + "".join(f"    {_value(x)},\n" for x in v) + "]"
    return _value(v)


def _lines(table: str, values: Iterable[tuple[str, Any]]) -> list[str]:
    """A table's lines (a blank line first); None values are left out."""
    return ["", f"[{table}]", *(f"{k} = {_field(v)}" for k, v in values if v is not None)]


def _write(bm: BlockMap) -> str:
    lim = bm.limits
    out = _lines("limits", [("power_w", lim.power_w), ("parallel", lim.parallel),
                            ("touchdown_power_w", lim.touchdown_power_w)])[1:]
    for r in bm.resources.values():
        if not r.implicit:
            out += _lines(f"resource.{_key(r.name)}", [("count", r.count), ("shared", r.shared)])
    for b in bm.blocks.values():
        out += _lines(f"block.{_key(b.name)}", [
            ("uses", b.uses), ("power_w", b.power_w), ("after", b.after), ("pinned", b.pinned),
            ("tests", [list(r) for r in b.tests] or None), ("names", b.names or None)])
    if bm.economics:
        e = bm.economics
        out += _lines("economics", [
            ("units_per_year", e.units_per_year), ("tester_cost_per_hour", e.tester_cost_per_hour),
            ("index_ms", e.index_ms), ("currency", e.currency or None)])
    for w in bm.whatifs.values():
        out += _lines(f"whatif.{_key(w.name)}", [("kind", w.kind), *_whatif_values(w),
                                                  ("change", w.change), ("note", w.note or None)])
    return "\n".join(out) + "\n"


def _whatif_values(w: WhatIf) -> list[tuple[str, Any]]:
    if isinstance(w, Broadcast):
        return [("blocks", w.blocks), ("overhead_ms", w.overhead_ms), ("power_w", w.power_w)]
    if isinstance(w, ExtraInstrument):
        return [("resource", w.resource), ("add", w.add)]
    options = [{k: v for k, v in (("name", o.name), ("time_ms", o.time_ms),
                                  ("power_w", o.power_w), ("uses", o.uses)) if v is not None}
               for o in w.options]
    return [("block", w.block), ("options", _Multiline(options))]


# ------------------------------------------------------------------ a draft map


def draft_block_map(blocks: list[tuple[str, float]],
                    uses: dict[str, list[str]] | None = None) -> str:
    """A starting block map from measured blocks (name, mean ms) in program order: each
    runs after the one before, as measured; power and limits are left for the engineer."""
    names = [n for n, _ in blocks]
    dupes = sorted({n for n in names if names.count(n) > 1})
    if dupes:
        raise ValueError(f"blocks listed more than once: {', '.join(dupes)}")
    if "" in names or any("" in held for held in (uses or {}).values()):
        raise ValueError("an empty block or resource name")
    inferred = dict.fromkeys(u for n in names for u in (uses or {}).get(n, ()))
    out = ["# Draft block map, written by tandem from measured block times (program order).",
           "# Every block runs after the one before it, as measured: loosen `after` where the",
           "# program allows, set each block's power and the per-site limits, then plan.",
           "", "[limits]",
           "# power_w = 3.0    # TODO: per site, the most power the device may draw at once (W)",
           "# parallel = 2     # TODO: per site, the most blocks running at once"]
    for r in inferred:
        out += ["", f"[resource.{_key(r)}]", "count = 1",
                "shared = false     # TODO: inferred from pins (per site); check the count"]
    prev: str | None = None
    for name, mean_ms in blocks:
        if name == UNASSIGNED:
            out += ["", f"# {UNASSIGNED}: {_ms(mean_ms)} in tests that no block claims"]
            continue
        held = None if uses is None else uses.get(name)
        out += ["", f"[block.{_key(name)}]     # measured: {_ms(mean_ms)} mean",
                "uses = []     # TODO: instruments and pins it holds (not inferred)"
                if held is None else
                f"uses = {_value(list(dict.fromkeys(held)))}     # inferred from pins",
                "power_w = 0.0  # TODO: set from the device's power budget",
                f"after = {_value([prev] if prev else [])}", "pinned = false"]
        prev = name
    out += ["", "# [economics]", "# units_per_year = 1000000   # TODO",
            "# tester_cost_per_hour = 0.0   # TODO"]
    return "\n".join(out) + "\n"


def _ms(v: float) -> str:
    return f"{v:.3f} ms" if math.isfinite(v) else "unknown"
