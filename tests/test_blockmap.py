"""The block map: what it accepts, every error it names (exact one-line messages), the
canonical writer's round trip, assignment rules and the draft map."""

from __future__ import annotations

import tomllib
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from pipeline.errors import ConfigError
from pipeline.plan.blockmap import (
    UNASSIGNED,
    Alternative,
    Block,
    BlockMap,
    Broadcast,
    Economics,
    ExtraInstrument,
    Limits,
    Option,
    Resource,
    Rule,
    draft_block_map,
    load_block_map,
    parse_block_map,
)

SAMPLE = Path(__file__).resolve().parent.parent / "sample_logs" / "blocks.toml"

# A small valid map; error cases below append to it or replace it.
BASE = """\
[limits]
power_w = 3.0
parallel = 4

[resource.rf_meter]
count = 1
shared = true

[block.contact]
pinned = true

[block.scan_core0]
uses = ["scan_port"]
power_w = 1.2
after = ["contact"]

[block.scan_core1]
uses = ["scan_port"]
power_w = 1.2
after = ["contact"]

[block.radio_tx]
uses = ["rf_meter"]
power_w = 0.9
after = ["contact"]
"""


def error_of(text: str) -> str:
    with pytest.raises(ConfigError) as e:
        parse_block_map(text)
    return str(e.value)


# (id, TOML, the exact message). Each validation rule has its own case.
ERRORS = [
    # after: unknown blocks and cycles
    ("after-unknown-close", '[block.contact]\n[block.scan_core0]\nafter = ["contct"]\n',
     "blocks.toml: [block.scan_core0] after = [\"contct\"]: unknown block 'contct' "
     "(did you mean 'contact'?)"),
    ("after-unknown-far", '[block.contact]\n[block.scan_core0]\nafter = ["zz"]\n',
     "blocks.toml: [block.scan_core0] after = [\"zz\"]: unknown block 'zz' "
     "(declare [block.zz] or remove it)"),
    ("after-cycle-2", '[block.a]\nafter = ["b"]\n[block.b]\nafter = ["a"]\n',
     'blocks.toml: [block.a] after = ["b"]: cycle in after: a -> b -> a '
     "(each waits for the next: remove one of these entries)"),
    ("after-cycle-3", '[block.x]\n[block.a]\nafter = ["x", "c"]\n[block.b]\nafter = ["a"]\n'
     '[block.c]\nafter = ["b"]\n',
     'blocks.toml: [block.a] after = ["x", "c"]: cycle in after: a -> c -> b -> a '
     "(each waits for the next: remove one of these entries)"),
    ("after-self", '[block.a]\nafter = ["a"]\n',
     'blocks.toml: [block.a] after = ["a"]: cycle in after: a -> a '
     "(each waits for the next: remove one of these entries)"),
    ("after-twice", '[block.a]\n[block.b]\nafter = ["a", "a"]\n',
     "blocks.toml: [block.b] after = [\"a\", \"a\"]: 'a' is listed twice (remove one)"),
    # resources
    ("resource-count-0", "[resource.rf_meter]\ncount = 0\n",
     "blocks.toml: [resource.rf_meter] count = 0: must be at least 1 "
     "(a block that needs no rf_meter should not list it in uses)"),
    ("resource-count-negative", "[resource.rf_meter]\ncount = -2\n",
     "blocks.toml: [resource.rf_meter] count = -2: must be at least 1 "
     "(a block that needs no rf_meter should not list it in uses)"),
    # power and limits
    ("block-power-negative", "[block.a]\npower_w = -0.5\n",
     "blocks.toml: [block.a] power_w = -0.5: cannot be negative"),
    ("limit-power-negative", "[limits]\npower_w = -3\n",
     "blocks.toml: [limits] power_w = -3: cannot be negative"),
    ("limit-power-zero", "[limits]\npower_w = 0.0\n",
     "blocks.toml: [limits] power_w = 0.0: must be greater than 0 "
     "(leave power_w out for no limit)"),
    ("block-too-big", "[limits]\npower_w = 3.0\n[block.big]\npower_w = 4.0\n",
     "blocks.toml: [block.big] power_w = 4.0: too big for the power limit of 3.0 W per site "
     "(lower it, or raise [limits] power_w)"),
    ("parallel-0", "[limits]\nparallel = 0\n",
     "blocks.toml: [limits] parallel = 0: must be at least 1 (leave parallel out for no limit)"),
    ("power-nan", "[block.a]\npower_w = nan\n",
     "blocks.toml: [block.a] power_w = nan: expected a finite number"),
    # unknown keys and tables (typos)
    ("typo-top-table", "[limit]\npower_w = 3.0\n",
     "blocks.toml: [limit]: unknown table (did you mean 'limits'?)"),
    ("typo-top-key", "power_w = 3.0\n",
     "blocks.toml: power_w = 3.0: unknown key "
     "(known tables: limits, resource, block, economics, whatif)"),
    ("typo-limits", "[limits]\nparalel = 2\n",
     "blocks.toml: [limits] paralel = 2: unknown key (did you mean 'parallel'?)"),
    ("typo-resource", "[resource.rf_meter]\ncuont = 1\n",
     "blocks.toml: [resource.rf_meter] cuont = 1: unknown key (did you mean 'count'?)"),
    ("typo-block", "[block.a]\npowr_w = 1.0\n",
     "blocks.toml: [block.a] powr_w = 1.0: unknown key (did you mean 'power_w'?)"),
    ("typo-block-far", "[block.a]\nzzz = 1\n",
     "blocks.toml: [block.a] zzz = 1: unknown key "
     "(known keys: uses, power_w, after, pinned, tests, names)"),
    ("typo-economics", "[economics]\nunits_per_yaer = 5\n",
     "blocks.toml: [economics] units_per_yaer = 5: unknown key "
     "(did you mean 'units_per_year'?)"),
    ("typo-whatif", '[resource.m]\n[whatif.w]\nkind = "extra_instrument"\nresource = "m"\n'
     "ad = 2\n",
     "blocks.toml: [whatif.w] ad = 2: unknown key (did you mean 'add'?)"),
    ("typo-option", '[block.a]\n[whatif.w]\nkind = "alternative"\nblock = "a"\n'
     'options = [{name = "x"}, {name = "y", tim_ms = 3.0}]\n',
     "blocks.toml: [whatif.w] options[1].tim_ms = 3.0: unknown key (did you mean 'time_ms'?)"),
    # wrong types
    ("type-bool", '[block.a]\npinned = "yes"\n',
     'blocks.toml: [block.a] pinned = "yes": expected true or false, found a string'),
    ("type-number", '[block.a]\npower_w = "1.2"\n',
     'blocks.toml: [block.a] power_w = "1.2": expected a number, found a string'),
    ("type-number-bool", "[block.a]\npower_w = true\n",
     "blocks.toml: [block.a] power_w = true: expected a number, found a boolean"),
    ("type-integer", "[limits]\nparallel = 2.5\n",
     "blocks.toml: [limits] parallel = 2.5: expected an integer, found a float"),
    ("type-uses-string", '[block.a]\nuses = "scan_port"\n',
     'blocks.toml: [block.a] uses = "scan_port": expected an array of strings, found a string '
     '(write uses = ["scan_port"])'),
    ("type-after-item", "[block.a]\nafter = [1]\n",
     "blocks.toml: [block.a] after = [1]: expected an array of strings, found an integer 1 "
     "in it"),
    ("type-shared", "[resource.r]\nshared = 1\n",
     "blocks.toml: [resource.r] shared = 1: expected true or false, found an integer"),
    ("type-limits-table", "limits = 3\n",
     "blocks.toml: limits = 3: expected a table, found an integer"),
    ("type-block-table", "[block]\na = 3\n",
     "blocks.toml: [block] a = 3: expected a table, found an integer (write [block.a])"),
    ("empty-name", '[block.""]\n',
     'blocks.toml: [block.""]: an empty name'),
    ("empty-use", '[block.a]\nuses = [""]\n',
     'blocks.toml: [block.a] uses = [""]: an empty name'),
    ("reserved-name", "[block.unassigned]\n",
     "blocks.toml: [block.unassigned]: 'unassigned' is reserved for tests that no block "
     "claims (choose another name)"),
    # assignment rules
    ("rule-lo-gt-hi", "[block.a]\ntests = [[1000, 1999], [5010, 5000]]\n",
     "blocks.toml: [block.a] tests = [[1000, 1999], [5010, 5000]]: range [5010, 5000] has "
     "lo > hi (write [5000, 5010])"),
    ("rule-not-range", "[block.a]\ntests = [[1, 2, 3]]\n",
     "blocks.toml: [block.a] tests = [[1, 2, 3]]: [1, 2, 3] is not a test number or a "
     "[lo, hi] range (e.g. tests = [[1000, 1999], 2500])"),
    ("rule-negative", "[block.a]\ntests = [[-1, 5]]\n",
     "blocks.toml: [block.a] tests = [[-1, 5]]: range [-1, 5] is outside test numbers "
     "0..4294967295"),
    ("rule-tests-type", "[block.a]\ntests = 1000\n",
     "blocks.toml: [block.a] tests = 1000: expected an array of [lo, hi] ranges, found an "
     "integer (e.g. tests = [[1000, 1999]])"),
    ("rule-names-type", '[block.a]\nnames = "scan_*"\n',
     'blocks.toml: [block.a] names = "scan_*": expected an array of strings, found a string '
     '(write names = ["scan_*"])'),
    # economics
    ("economics-missing", "[economics]\ntester_cost_per_hour = 1.0\n",
     "blocks.toml: [economics]: missing key 'units_per_year' (e.g. units_per_year = 1)"),
    ("economics-units-0", "[economics]\nunits_per_year = 0\ntester_cost_per_hour = 1.0\n",
     "blocks.toml: [economics] units_per_year = 0: must be at least 1"),
    ("economics-cost-negative", "[economics]\nunits_per_year = 5\ntester_cost_per_hour = -1\n",
     "blocks.toml: [economics] tester_cost_per_hour = -1: cannot be negative"),
    ("economics-index-negative",
     "[economics]\nunits_per_year = 5\ntester_cost_per_hour = 1\nindex_ms = -4.0\n",
     "blocks.toml: [economics] index_ms = -4.0: cannot be negative"),
    ("economics-currency-type",
     "[economics]\nunits_per_year = 5\ntester_cost_per_hour = 1\ncurrency = 3\n",
     "blocks.toml: [economics] currency = 3: expected a string, found an integer"),
    # what-ifs: common
    ("whatif-no-kind", "[whatif.w]\nblocks = []\n",
     "blocks.toml: [whatif.w]: missing key 'kind' "
     "(one of: broadcast, alternative, extra_instrument)"),
    ("whatif-bad-kind", '[whatif.w]\nkind = "brodcast"\n',
     "blocks.toml: [whatif.w] kind = \"brodcast\": unknown kind (did you mean 'broadcast'?)"),
    ("whatif-kind-type", "[whatif.w]\nkind = [1]\n",
     "blocks.toml: [whatif.w] kind = [1]: unknown kind "
     "(one of: broadcast, alternative, extra_instrument)"),
    ("whatif-change", '[resource.m]\n[whatif.w]\nkind = "extra_instrument"\nresource = "m"\n'
     'change = "progam"\n',
     "blocks.toml: [whatif.w] change = \"progam\": expected \"design\" or \"program\" "
     "(did you mean 'program'?)"),
    ("whatif-key-of-other-kind", '[block.a]\n[block.b]\n[whatif.w]\nkind = "broadcast"\n'
     'blocks = ["a", "b"]\noverhead_ms = 1.0\nresource = "m"\n',
     "blocks.toml: [whatif.w] resource = \"m\": unknown key "
     "(known keys: kind, change, note, blocks, overhead_ms, power_w)"),
    # broadcast
    ("broadcast-duplicate", BASE + '[whatif.w]\nkind = "broadcast"\n'
     'blocks = ["scan_core0", "scan_core1", "scan_core0"]\noverhead_ms = 2.0\n',
     'blocks.toml: [whatif.w] blocks = ["scan_core0", "scan_core1", "scan_core0"]: '
     "'scan_core0' is listed twice (remove one)"),
    ("broadcast-one", BASE + '[whatif.w]\nkind = "broadcast"\nblocks = ["scan_core0"]\n'
     "overhead_ms = 2.0\n",
     'blocks.toml: [whatif.w] blocks = ["scan_core0"]: a broadcast merges at least two blocks'),
    ("broadcast-unknown", BASE + '[whatif.w]\nkind = "broadcast"\n'
     'blocks = ["scan_core0", "scan_core2"]\noverhead_ms = 2.0\n',
     'blocks.toml: [whatif.w] blocks = ["scan_core0", "scan_core2"]: unknown block '
     "'scan_core2' (did you mean 'scan_core1'?)"),
    ("broadcast-no-overhead", BASE + '[whatif.w]\nkind = "broadcast"\n'
     'blocks = ["scan_core0", "scan_core1"]\n',
     "blocks.toml: [whatif.w]: missing key 'overhead_ms' (e.g. overhead_ms = 1.0)"),
    ("broadcast-overhead-negative", BASE + '[whatif.w]\nkind = "broadcast"\n'
     'blocks = ["scan_core0", "scan_core1"]\noverhead_ms = -1.0\n',
     "blocks.toml: [whatif.w] overhead_ms = -1.0: cannot be negative"),
    ("broadcast-pinned", BASE + '[whatif.w]\nkind = "broadcast"\n'
     'blocks = ["contact", "scan_core1"]\noverhead_ms = 1.0\n',
     'blocks.toml: [whatif.w] blocks = ["contact", "scan_core1"]: \'contact\' is pinned: it '
     "keeps its serial slot and cannot be merged"),
    ("broadcast-ordered", '[block.a]\n[block.b]\nafter = ["a"]\n[whatif.w]\n'
     'kind = "broadcast"\nblocks = ["a", "b"]\noverhead_ms = 1.0\n',
     "blocks.toml: [whatif.w] blocks = [\"a\", \"b\"]: 'b' runs after 'a': blocks that run in "
     "order cannot be merged"),
    ("broadcast-cycle", '[block.a]\n[block.m]\nafter = ["a"]\n[block.b]\nafter = ["m"]\n'
     '[whatif.w]\nkind = "broadcast"\nblocks = ["a", "b"]\noverhead_ms = 1.0\n',
     'blocks.toml: [whatif.w] blocks = ["a", "b"]: merging them makes a cycle in after: '
     "a+b -> m -> a+b"),
    ("broadcast-too-big", BASE + '[block.scan_core2]\npower_w = 1.2\n[whatif.w]\n'
     'kind = "broadcast"\nblocks = ["scan_core0", "scan_core1", "scan_core2"]\n'
     "overhead_ms = 1.0\n",
     'blocks.toml: [whatif.w] blocks = ["scan_core0", "scan_core1", "scan_core2"]: the merged '
     "block draws 3.6 W (the members' sum), too big for the power limit of 3.0 W per site "
     "(broadcast fewer blocks, or set power_w if they do not all switch at once)"),
    ("broadcast-power-too-big", BASE + '[whatif.w]\nkind = "broadcast"\n'
     'blocks = ["scan_core0", "scan_core1"]\noverhead_ms = 1.0\npower_w = 3.5\n',
     "blocks.toml: [whatif.w] power_w = 3.5: too big for the power limit of 3.0 W per site "
     "(lower it, or raise [limits] power_w)"),
    # alternative
    ("alternative-unknown-block", BASE + '[whatif.w]\nkind = "alternative"\n'
     'block = "radio_rx"\noptions = [{name = "a"}, {name = "b"}]\n',
     "blocks.toml: [whatif.w] block = \"radio_rx\": unknown block 'radio_rx' "
     "(did you mean 'radio_tx'?)"),
    ("alternative-one-option", BASE + '[whatif.w]\nkind = "alternative"\n'
     'block = "radio_tx"\noptions = [{name = "a"}]\n',
     'blocks.toml: [whatif.w] options = [{ name = "a" }]: an alternative needs at least two '
     "options (one may leave time_ms out: the block as measured)"),
    ("alternative-no-options", BASE + '[whatif.w]\nkind = "alternative"\nblock = "radio_tx"\n',
     "blocks.toml: [whatif.w]: missing key 'options' "
     '(e.g. options = [{name = "a"}, {name = "b"}])'),
    ("alternative-option-type", BASE + '[whatif.w]\nkind = "alternative"\n'
     'block = "radio_tx"\noptions = [{name = "a"}, "b"]\n',
     'blocks.toml: [whatif.w] options = [{ name = "a" }, "b"]: options[1] is a string, '
     "expected a table"),
    ("alternative-option-name-missing", BASE + '[whatif.w]\nkind = "alternative"\n'
     'block = "radio_tx"\noptions = [{name = "a"}, {time_ms = 1.0}]\n',
     "blocks.toml: [whatif.w]: missing key 'options[1].name' (e.g. name = \"name\")"),
    ("alternative-option-twice", BASE + '[whatif.w]\nkind = "alternative"\n'
     'block = "radio_tx"\noptions = [{name = "a"}, {name = "a", time_ms = 1.0}]\n',
     "blocks.toml: [whatif.w] options[1].name = \"a\": option 'a' is listed twice "
     "(give each a name)"),
    ("alternative-option-time-negative", BASE + '[whatif.w]\nkind = "alternative"\n'
     'block = "radio_tx"\noptions = [{name = "a"}, {name = "b", time_ms = -1.0}]\n',
     "blocks.toml: [whatif.w] options[1].time_ms = -1.0: cannot be negative"),
    ("alternative-option-too-big", BASE + '[whatif.w]\nkind = "alternative"\n'
     'block = "radio_tx"\noptions = [{name = "a"}, {name = "b", power_w = 9.0}]\n',
     "blocks.toml: [whatif.w] options[1].power_w = 9.0: too big for the power limit of 3.0 W "
     "per site (lower it, or raise [limits] power_w)"),
    # extra instrument
    ("extra-unknown-resource", BASE + '[whatif.w]\nkind = "extra_instrument"\n'
     'resource = "rf_metre"\n',
     "blocks.toml: [whatif.w] resource = \"rf_metre\": unknown resource 'rf_metre' "
     "(did you mean 'rf_meter'?)"),
    ("extra-unknown-resource-far", BASE + '[whatif.w]\nkind = "extra_instrument"\n'
     'resource = "zz"\n',
     "blocks.toml: [whatif.w] resource = \"zz\": unknown resource 'zz' "
     "(declare it in [resource.<name>] or name it in a block's uses)"),
    ("extra-add-0", BASE + '[whatif.w]\nkind = "extra_instrument"\nresource = "rf_meter"\n'
     "add = 0\n",
     "blocks.toml: [whatif.w] add = 0: must be at least 1"),
    ("extra-no-resource", '[whatif.w]\nkind = "extra_instrument"\n',
     "blocks.toml: [whatif.w]: missing key 'resource' (e.g. resource = \"name\")"),
    # not TOML at all
    ("not-toml", "[limits\npower_w = 3\n",
     "blocks.toml: not valid TOML: Expected ']' at the end of a table declaration "
     "(at line 1, column 8)"),
]


@pytest.mark.parametrize(("text", "message"), [c[1:] for c in ERRORS],
                         ids=[c[0] for c in ERRORS])
def test_each_mistake_is_one_line_naming_file_table_and_key(text: str, message: str) -> None:
    got = error_of(text)
    assert got == message
    assert "\n" not in got


def test_error_cases_are_named_once() -> None:
    ids = [c[0] for c in ERRORS]
    assert len(ids) == len(set(ids))


def test_the_source_name_is_the_one_given() -> None:
    with pytest.raises(ConfigError, match=r"^maps/pf4\.toml: \[block\.a\] power_w"):
        parse_block_map("[block.a]\npower_w = -1\n", source="maps/pf4.toml")


def test_long_values_are_cut_short_in_messages() -> None:
    text = "[block.a]\nafter = [" + ", ".join(f'"b{i}"' for i in range(40)) + "]\n"
    msg = error_of(text)
    assert "...: unknown block 'b0'" in msg and len(msg) < 160


def test_load_names_the_path_when_the_file_is_missing(tmp_path: Path) -> None:
    path = tmp_path / "nowhere.toml"
    with pytest.raises(ConfigError) as e:
        load_block_map(path)
    assert str(e.value).startswith(f"{path}: cannot read the block map: ")


def test_load_refuses_bytes_that_are_not_utf8(tmp_path: Path) -> None:
    path = tmp_path / "latin.toml"
    path.write_bytes(b"[block.caf\xe9]\n")
    with pytest.raises(ConfigError, match=r"not UTF-8 text \(byte 10\)"):
        load_block_map(path)


def test_load_accepts_a_byte_order_mark(tmp_path: Path) -> None:
    path = tmp_path / "bom.toml"
    path.write_bytes(b"\xef\xbb\xbf[block.a]\n")
    assert list(load_block_map(path).blocks) == ["a"]


# ------------------------------------------------------------------ what a map holds


def test_the_committed_sample_parses() -> None:
    bm = load_block_map(SAMPLE)
    raw = tomllib.loads(SAMPLE.read_text(encoding="utf-8"))
    assert list(bm.blocks) == list(raw["block"])
    assert bm.limits == Limits(power_w=3.0, parallel=3)
    assert bm.resources["rf_meter"] == Resource("rf_meter", 1, shared=True)
    assert bm.resources["scan_port"] == Resource("scan_port", 1, shared=False)
    assert bm.resources["pattern_gen"] == Resource("pattern_gen", implicit=True)
    assert bm.blocks["contact"].pinned and bm.topological_order()[0] == "contact"
    assert bm.topological_order() == list(bm.blocks)
    assert isinstance(bm.economics, Economics) and bm.economics.units_per_year > 0
    kinds = {w.kind for w in bm.whatifs.values()}
    assert kinds == {"broadcast", "alternative", "extra_instrument"}
    assert bm.rules() == []


def test_defaults_of_an_almost_empty_map() -> None:
    bm = parse_block_map("[block.a]\n")
    assert bm == BlockMap(Limits(), {}, {"a": Block("a")}, None, {})
    assert bm.limits == Limits(power_w=None, parallel=None)


def test_undeclared_resources_are_per_site_count_one_and_flagged() -> None:
    bm = parse_block_map(BASE)
    assert list(bm.resources) == ["rf_meter", "scan_port"]
    assert bm.resources["scan_port"] == Resource("scan_port", count=1, shared=False,
                                                 implicit=True)
    assert not bm.resources["rf_meter"].implicit
    assert "[resource.scan_port]" not in bm.to_toml()  # implied again on reading


def test_option_uses_imply_resources_and_extra_instrument_may_name_them() -> None:
    bm = parse_block_map(BASE + '[whatif.alt]\nkind = "alternative"\nblock = "radio_tx"\n'
                         'options = [{name = "a"}, {name = "b", uses = ["pattern_gen"]}]\n'
                         '[whatif.more]\nkind = "extra_instrument"\nresource = "pattern_gen"\n')
    assert bm.resources["pattern_gen"].implicit
    assert bm.whatifs["more"] == ExtraInstrument("more", "pattern_gen", add=1)


def test_whatifs_as_data() -> None:
    bm = parse_block_map(BASE + """
[whatif.bc]
kind = "broadcast"
blocks = ["scan_core0", "scan_core1"]
overhead_ms = 4.5
note = "one scan input"

[whatif.alt]
kind = "alternative"
block = "radio_tx"
change = "program"
[[whatif.alt.options]]
name = "as_is"
[[whatif.alt.options]]
name = "faster"
time_ms = 50
power_w = 1
uses = []
""")
    bc = bm.whatifs["bc"]
    assert bc == Broadcast("bc", ("scan_core0", "scan_core1"), 4.5, None, "design",
                           "one scan input")
    assert isinstance(bc, Broadcast)
    assert bc.merged_power_w(bm.blocks) == 2.4
    assert bc.merged_uses(bm.blocks) == ("scan_port",)
    alt = bm.whatifs["alt"]
    assert alt == Alternative("alt", "radio_tx", (Option("as_is"),
                                                  Option("faster", 50.0, 1.0, ())), "program")
    assert isinstance(alt, Alternative)
    assert [type(o.time_ms) for o in alt.options] == [type(None), float]


def test_power_sums_are_compared_with_a_rounding_tolerance() -> None:
    bm = parse_block_map("[limits]\npower_w = 0.3\n[block.a]\npower_w = 0.1\n"
                         '[block.b]\npower_w = 0.2\n[whatif.w]\nkind = "broadcast"\n'
                         'blocks = ["a", "b"]\noverhead_ms = 0\n')
    w = bm.whatifs["w"]
    assert isinstance(w, Broadcast) and w.merged_power_w(bm.blocks) == pytest.approx(0.3)


def test_broadcast_power_given_overrides_the_sum() -> None:
    bm = parse_block_map(BASE + '[block.scan_core2]\npower_w = 1.2\n[whatif.w]\n'
                         'kind = "broadcast"\nblocks = ["scan_core0", "scan_core1", '
                         '"scan_core2"]\noverhead_ms = 0\npower_w = 2.0\n')
    w = bm.whatifs["w"]
    assert isinstance(w, Broadcast) and w.merged_power_w(bm.blocks) == 2.0


def test_no_power_limit_means_any_block_power_fits() -> None:
    bm = parse_block_map("[block.a]\npower_w = 400.0\n")
    assert bm.blocks["a"].power_w == 400.0


def test_integers_are_accepted_where_numbers_are_expected() -> None:
    bm = parse_block_map("[limits]\npower_w = 3\n[block.a]\npower_w = 1\n")
    assert bm.limits.power_w == 3.0 and isinstance(bm.blocks["a"].power_w, float)


def test_topological_order_keeps_file_order_between_independent_blocks() -> None:
    bm = parse_block_map('[block.late]\nafter = ["early"]\n[block.c]\n[block.early]\n'
                         '[block.a]\nafter = ["c"]\n')
    assert bm.topological_order() == ["c", "early", "late", "a"]


def test_a_cycle_in_a_map_built_by_hand_is_reported_by_topological_order() -> None:
    bm = BlockMap(blocks={"a": Block("a", after=("b",)), "b": Block("b", after=("a",))})
    with pytest.raises(ConfigError, match=r"cycle in after: a -> b -> a"):
        bm.topological_order()


def test_missing_lists_measured_blocks_the_map_lacks_in_measured_order() -> None:
    bm = parse_block_map(BASE)
    measured = ["contact", "pll_lock", UNASSIGNED, "scan_core0", "dc_leakage", "pll_lock"]
    assert bm.missing(measured) == ["pll_lock", "dc_leakage"]
    assert bm.missing(bm.blocks) == []


# ------------------------------------------------------------------ assignment rules

RULES = """\
[block.contact]
tests = [[1000, 1999], 2500]
names = ["cont_*"]
[block.scan_core0]
names = ["scan_c0_*", "*_bist_?"]
[block.catch_all]
tests = [[0, 99999]]
names = ["*"]
"""


def test_rules_in_priority_order() -> None:
    bm = parse_block_map(RULES)
    assert bm.rules() == [
        Rule("contact", "tests", 1000, 1999, None), Rule("contact", "tests", 2500, 2500, None),
        Rule("contact", "names", None, None, "cont_*"),
        Rule("scan_core0", "names", None, None, "scan_c0_*"),
        Rule("scan_core0", "names", None, None, "*_bist_?"),
        Rule("catch_all", "tests", 0, 99999, None), Rule("catch_all", "names", None, None, "*"),
    ]
    assert bm.rules()[0] == ("contact", "tests", 1000, 1999, None)  # plain tuples too


@pytest.mark.parametrize(("num", "name", "block"), [
    (1000, "x", "contact"),            # range, inclusive at both ends
    (1999, "x", "contact"),
    (2500, "x", "contact"),            # a bare number
    (2000, "cont_vdd", "contact"),     # file order: contact's pattern precedes catch_all
    (1500, "scan_c0_sa01", "contact"),  # ... and contact's range scan_core0's pattern
    (None, "cont_vdd", "contact"),     # no number: patterns only
    (None, "scan_c0_sa01", "scan_core0"),
    (None, "sram_bist_1", "scan_core0"),
    (None, "sram_bist_12", "catch_all"),  # ? is exactly one character
    (None, "SCAN_C0_SA01", "catch_all"),  # patterns are case-sensitive
    (123456, None, None),              # nothing matches: attribution's unassigned
    (None, None, None),
])
def test_assign_first_matching_rule_wins(num: int | None, name: str | None,
                                         block: str | None) -> None:
    assert parse_block_map(RULES).assign(num, name) == block


def test_assign_without_rules_is_none() -> None:
    assert parse_block_map(BASE).assign(1000, "cont_vdd") is None


def test_assign_character_classes() -> None:
    bm = parse_block_map('[block.a]\nnames = ["leak_i[lh]_*"]\n')
    assert bm.assign(None, "leak_il_vdd") == "a" and bm.assign(None, "leak_ix_vdd") is None


# ------------------------------------------------------------------ round trips

RICH = BASE + """
[block."odd name.with dots"]
uses = ["pins \\"A\\"", "rf_meter"]
power_w = 0.25
after = ["contact"]
tests = [[1000, 1999], 7]
names = ["cont_*", "tab\\there"]

[economics]
units_per_year = 1_500_000
tester_cost_per_hour = 72.5
index_ms = 410.0
currency = "credits"

[whatif.bc]
kind = "broadcast"
blocks = ["scan_core0", "scan_core1"]
overhead_ms = 3.0
power_w = 2.0
note = "line one\\nline two"

[whatif."alt ernative"]
kind = "alternative"
block = "radio_tx"
options = [{name = "as_is"}, {name = "b", time_ms = 1e-3, power_w = 0.0, uses = ["pg"]}]

[whatif.more]
kind = "extra_instrument"
resource = "pg"
add = 2
change = "program"
"""


@pytest.mark.parametrize("text", [BASE, RICH, SAMPLE.read_text(encoding="utf-8"), RULES],
                         ids=["base", "rich", "sample", "rules"])
def test_round_trip_parse_write_parse(text: str) -> None:
    bm = parse_block_map(text)
    again = parse_block_map(bm.to_toml())
    assert again == bm
    assert list(again.blocks) == list(bm.blocks)
    assert list(again.resources) == list(bm.resources)
    assert list(again.whatifs) == list(bm.whatifs)
    assert again.to_toml() == bm.to_toml()  # canonical: a fixed point


def test_the_canonical_form_writes_every_block_value() -> None:
    text = parse_block_map("[block.a]\n").to_toml()
    assert text == ("[limits]\n\n[block.a]\nuses = []\npower_w = 0.0\nafter = []\n"
                    "pinned = false\n")


names = st.text(st.characters(blacklist_categories=("Cs",)), min_size=1, max_size=12)
watts = st.floats(min_value=0, max_value=1e6, allow_nan=False, allow_infinity=False)


@given(st.lists(st.tuples(names.filter(lambda n: n != UNASSIGNED), watts, names), min_size=1,
                max_size=5, unique_by=lambda t: t[0]),
       st.text(max_size=20))
@settings(max_examples=60, deadline=None)
def test_round_trip_of_any_names_and_numbers(rows: list[tuple[str, float, str]],
                                              note: str) -> None:
    first = rows[0][0]
    blocks = {n: Block(n, uses=(u,), power_w=w, after=(first,) if n != first else (),
                       names=(u,)) for n, w, u in rows}
    resources = {u: Resource(u, implicit=True) for _, _, u in rows}
    whatifs = {note or "w": ExtraInstrument(note or "w", rows[0][2], 1, "design", note)}
    bm = BlockMap(Limits(None, 3), resources, blocks, Economics(1, 0.5, None, note), whatifs)
    assert parse_block_map(bm.to_toml()) == bm


# ------------------------------------------------------------------ the draft map

MEASURED = [("contact", 15.0), ("dc_leakage", 85.25), (UNASSIGNED, 3.5),
            ("scan core0", 300.0), ("radio_tx", 90.0)]


def test_draft_parses_back_serial_as_measured() -> None:
    text = draft_block_map(MEASURED, {"scan core0": ["scan_port"], "radio_tx": []})
    bm = parse_block_map(text)
    assert list(bm.blocks) == ["contact", "dc_leakage", "scan core0", "radio_tx"]
    assert [b.after for b in bm.blocks.values()] == [(), ("contact",), ("dc_leakage",),
                                                     ("scan core0",)]
    assert all(b.power_w == 0.0 and not b.pinned for b in bm.blocks.values())
    assert bm.blocks["scan core0"].uses == ("scan_port",)
    assert bm.blocks["radio_tx"].uses == () and bm.blocks["contact"].uses == ()
    assert bm.resources["scan_port"] == Resource("scan_port", 1, shared=False)
    assert bm.topological_order() == list(bm.blocks)
    assert bm.missing(n for n, _ in MEASURED) == []
    assert parse_block_map(bm.to_toml()) == bm


def test_draft_marks_what_the_engineer_must_fill_in() -> None:
    text = draft_block_map(MEASURED, {"scan core0": ["scan_port"], "radio_tx": []})
    lines = text.splitlines()
    assert '[block."scan core0"]     # measured: 300.000 ms mean' in lines
    assert "[block.dc_leakage]     # measured: 85.250 ms mean" in lines
    assert lines.count("power_w = 0.0  # TODO: set from the device's power budget") == 4
    assert 'uses = ["scan_port"]     # inferred from pins' in lines
    assert "uses = []     # inferred from pins" in lines  # radio_tx: inferred, holds nothing
    todo = "uses = []     # TODO: instruments and pins it holds (not inferred)"
    assert lines.count(todo) == 2  # contact, dc_leakage
    assert "# unassigned: 3.500 ms in tests that no block claims" in lines


def test_draft_without_inference_marks_every_uses_todo() -> None:
    text = draft_block_map([("a", 1.0), ("b", float("nan"))])
    assert text.count("# TODO: instruments and pins it holds") == 2
    assert "# measured: unknown mean" in text
    assert list(parse_block_map(text).blocks) == ["a", "b"]


def test_draft_of_nothing_is_an_empty_valid_map() -> None:
    assert parse_block_map(draft_block_map([])) == BlockMap()


def test_draft_refuses_a_block_twice() -> None:
    with pytest.raises(ValueError, match="blocks listed more than once: a"):
        draft_block_map([("a", 1.0), ("b", 2.0), ("a", 3.0)])


def test_draft_refuses_empty_names_and_writes_each_resource_once() -> None:
    with pytest.raises(ValueError, match="an empty block or resource name"):
        draft_block_map([("", 1.0)])
    bm = parse_block_map(draft_block_map([("a", 1.0)], {"a": ["p", "p"]}))
    assert bm.blocks["a"].uses == ("p",)
