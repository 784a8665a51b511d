"""Every physics test says where its expected values come from.

The rule, kept here and summarised in docs/references.md ("How a test names its source"):

- Physics modules are the test modules of the main job, listed in ``PHYSICS_MODULES``:
  mechanics, heat, lock-in, load signals, motion, correlation, strain, ranges, speckle,
  registration, diagnosis, sweep, plan, demo and the end-to-end case. Every other module is
  listed in ``OTHER_MODULES`` with the reason it is not; a module in neither list fails
  :func:`test_every_test_module_is_classified`, so a new module is classified when it arrives.
- In a physics module every function named ``test*`` is a physics test, except
  (a) a pure error test: outside its ``with pytest.raises(...)`` / ``pytest.warns(...)``
  blocks it asserts nothing, or only about the exception it caught; and
  (b) a test whose docstring or comments say "not a physics check" followed by the reason
  (file plumbing, dtype and memory layout, progress output, a public-name listing, two code
  paths of the package compared with each other, self-consistency on the demo's data, which
  the package's own models generate).
- A physics test names its source when its docstring, a comment inside it, or the comment
  block right above it (decorators included) holds at least one of: a key of
  docs/references.md written in brackets (``[Kaw2006]``); an author-year (``Kaw (2006)``,
  ``Pan et al. 2008``); a general-purpose library used as the reference (NumPy, SciPy,
  scikit-image, OpenCV); "common practice"; "from memory"; or "independent" with the kind of
  computation written in the test (``independent forward model``), which must then say what
  is independent of the package's code. Code is not read: an ``np.`` call names nothing.
"""

from __future__ import annotations

import ast
import io
import re
import textwrap
import tokenize
from pathlib import Path

import pytest

TESTS = Path(__file__).parent
REFERENCES = TESTS.parent / "docs" / "references.md"

PHYSICS_MODULES = frozenset({
    "test_clt.py", "test_materials.py", "test_predict.py", "test_heat.py",      # mechanics, heat
    "test_lateral.py", "test_lateral_run.py",
    "test_lockin.py", "test_signals.py", "test_motion.py",                      # thermal side
    "test_dic_correlate.py", "test_dic_strain.py", "test_dic_ranges.py",        # correlation side
    "test_dic_speckle.py", "test_dic_api.py",
    "test_dic_noise.py", "test_dic_edges.py", "test_dic_resolution.py", "test_dic_settings.py",
    "test_register.py", "test_camera.py", "test_fiducials.py",                  # registration
    "test_registration_rule.py", "test_registration_checks.py", "test_register_quality.py",
    "test_diagnose.py", "test_sweep.py", "test_plan.py",                        # diagnosis, sweep, plan
    "test_demo.py", "test_end_to_end.py",                                       # whole runs
    "test_input_units.py", "test_frequency_from_load.py", "test_stack_sanity.py",  # input checks
    "test_correlation_inputs.py", "test_sweep_statistic.py",
    "test_api_conventions.py",                                                  # the Python API's rules
})

OTHER_MODULES = {
    "test_sources_named.py": "this rule itself",
    "test_public_api.py": "public names pinned against tests/data/public_api.json",
    "test_config.py": "config schema, units and error text",
    "test_hostile_config.py": "broken and hostile config files",
    "test_hostile_readers.py": "broken and hostile input files",
    "test_hostile_pipeline.py": "failures inside a campaign: exit codes, nothing half-written",
    "test_frames_io.py": "frame-stack readers",
    "test_sequences.py": "frame and image sequences: readers, order, cache, load logs; one run compared "
                         "across formats (its lock-in amplitude against the test's own forward model)",
    "test_dic_io.py": "correlation-field readers and their sign conventions",
    "test_cli.py": "argv and exit codes",
    "test_summary.py": "summary.json contents and schema",
    "test_report_html.py": "the HTML report's structure",
    "test_report_figures.py": "figures and their file formats",
    "test_report_browser.py": "the report in a headless browser",
    "test_resume.py": "skip, resume and overwrite of runs",
    "test_watch.py": "fusion watch: completion, settling, config reloads, kill and restart, memory",
    "test_workers.py": "local worker processes",
    "test_campaign_dask.py": "dask.distributed scheduling",
    "test_memory_budget.py": "memory use of the streaming passes",
    "test_import_graph.py": "the import structure of the package",
    "test_kernel_cache.py": "compiled kernels and numba's on-disk cache",
    "test_report_resolution.py": "resolution attributes through result.nc, summary.json and the report",
    "test_campaign_products.py": "frequency.nc, the band sentences and the report of a small campaign",
    "test_ownership.py": "what in an output folder is fusion's: publishing, recovery, refusals",
    "test_progress.py": "the progress display",
    "test_quoting.py": "file content quoted in messages",
    "test_timings.py": "the bookkeeping of a run's step timings and their terminal line",
    "test_api_rebuild.py": "the Python API's steps against the command line's result.nc (two code paths)",
    "test_api_door.py": "error text of the plausibility checks at the Python API's door",
    "test_docs.py": "the API reference, docstring references, README example and package data",
    "test_correlation_region.py": "dic.region and its deprecated (row, col) spelling roi: config, "
                                  "warnings, fusion check (two spellings compared)",
}

LIBRARIES = r"numpy|scipy|scikit-image|skimage|opencv|cv2"
YEAR = r"(?:18\d\d|19\d\d|20[0-2]\d)"
NAME = r"[A-Z][a-z\u00df-\u017f'\-]+"
COAUTHORS = rf"(?:\s+et\s+al\.?|\s*(?:&|and)\s*{NAME}(?:\s*(?:&|and)\s*{NAME})?)?"
AUTHOR_YEAR = re.compile(rf"\b{NAME}{COAUTHORS}(?:,?\s+|,?\s*\()\(?{YEAR}\b")
PHRASES = re.compile(
    rf"common practice|from memory|\b(?:{LIBRARIES})\b|"
    r"\bindependent\s+(?:forward\s+model|model|implementation|computation|derivation|"
    r"solution|reference|fit|synthesis|simulation)", re.IGNORECASE)
EXEMPT = re.compile(r"not a physics check", re.IGNORECASE)
RAISES = {"raises", "warns", "deprecated_call"}
CITED_KEY = re.compile(r"\[([A-Z][A-Za-z]*(?:\d+-)?(?:18|19|20)\d\d[a-z]?)\]")


def reference_keys(path=REFERENCES):
    """Keys of docs/references.md: each entry starts with a heading ``### [Key]``."""
    if not path.exists():
        return frozenset()
    return frozenset(re.findall(r"^###\s+\[([A-Za-z][\w\-]*)\]", path.read_text(encoding="utf-8"), re.M))


def _comments(source):
    """Comment text by line number (1-based)."""
    out = {}
    for tok in tokenize.generate_tokens(io.StringIO(source).readline):
        if tok.type == tokenize.COMMENT:
            out[tok.start[0]] = tok.string.lstrip("#").strip()
    return out


def _raises_call(node):
    f = node.func if isinstance(node, ast.Call) else None
    name = f.attr if isinstance(f, ast.Attribute) else f.id if isinstance(f, ast.Name) else None
    return name in RAISES


def _checks_outside_raises(body, caught=()):
    """True when a statement outside every ``pytest.raises`` block checks something other than
    the exception caught (an ``assert`` or an ``assert_*``/``approx``/``allclose`` call)."""
    caught = set(caught)
    for stmt in body:
        items = getattr(stmt, "items", ())
        if isinstance(stmt, (ast.With, ast.AsyncWith)) and any(_raises_call(i.context_expr) for i in items):
            caught |= {i.optional_vars.id for i in stmt.items if isinstance(i.optional_vars, ast.Name)}
            continue
        for node in ast.walk(stmt):
            if isinstance(node, ast.Assert):
                names = {n.id for n in ast.walk(node.test) if isinstance(n, ast.Name)}
                if not names & caught:
                    return True
            elif isinstance(node, ast.Call):
                f = node.func
                name = f.attr if isinstance(f, ast.Attribute) else f.id if isinstance(f, ast.Name) else ""
                if name.startswith("assert") or name in {"approx", "allclose", "isclose", "array_equal"}:
                    return True
    return False


def _has_raises(fn):
    return any(isinstance(n, ast.Call) and _raises_call(n) for n in ast.walk(fn))


def scan(source, keys=frozenset()):
    """Physics test functions of one module's source: ``(named, exempt, unnamed)`` name lists."""
    tree = ast.parse(source)
    comments = _comments(source)
    lines = source.splitlines()
    key_re = re.compile(r"\[(%s)\]" % "|".join(map(re.escape, sorted(keys)))) if keys else None
    named, exempt, unnamed = [], [], []
    functions = [n for n in ast.walk(tree) if isinstance(n, (ast.FunctionDef, ast.AsyncFunctionDef))
                 and n.name.startswith("test")]
    for fn in functions:
        start = min([fn.lineno] + [d.lineno for d in fn.decorator_list])
        while start > 1 and lines[start - 2].strip().startswith("#"):  # comment block right above
            start -= 1
        text = "\n".join([ast.get_docstring(fn) or ""]
                         + [c for ln, c in comments.items() if start <= ln <= fn.end_lineno])
        text = re.sub(r"\s+", " ", text)
        if EXEMPT.search(text) or (_has_raises(fn) and not _checks_outside_raises(fn.body)):
            exempt.append(fn.name)
        elif PHRASES.search(text) or AUTHOR_YEAR.search(text) or (key_re and key_re.search(text)):
            named.append(fn.name)
        else:
            unnamed.append(fn.name)
    return named, exempt, unnamed


# ---------------------------------------------------------------------------- the rule at work
def test_every_test_module_is_classified():
    modules = {p.name for p in TESTS.glob("test_*.py")}
    unknown = sorted(modules - PHYSICS_MODULES - set(OTHER_MODULES))
    assert not unknown, ("classify these test modules in tests/test_sources_named.py "
                         f"(PHYSICS_MODULES or OTHER_MODULES): {unknown}")
    assert not PHYSICS_MODULES & set(OTHER_MODULES)


def test_every_physics_test_names_its_source():
    keys = reference_keys()
    assert len(keys) >= 20, "docs/references.md lost its entries"
    missing = []
    for name in sorted(PHYSICS_MODULES):
        path = TESTS / name
        if path.exists():
            missing += [f"{name}::{f}" for f in scan(path.read_text(encoding="utf-8"), keys)[2]]
    assert not missing, ("these physics tests name no source (a docs/references.md key, an "
                         "author-year, a reference library, 'common practice' or 'from memory'); "
                         "see the rule in tests/test_sources_named.py:\n" + "\n".join(missing))


def unknown_keys(texts, keys):
    """Bracketed keys of the form Author+year cited in ``texts`` that ``keys`` does not hold."""
    cited = set()
    for text in texts:
        cited |= set(CITED_KEY.findall(text))
    return sorted(cited - set(keys))


def test_cited_keys_exist_in_references():
    # A bracketed key that looks like a reference (Author + year) must be an entry of
    # docs/references.md, or the citation points nowhere. This file is left out: its examples
    # cite keys that do not exist on purpose.
    paths = [p for p in list(TESTS.glob("*.py")) + list((TESTS.parent / "fusion").rglob("*.py"))
             if p.name != Path(__file__).name]
    missing = unknown_keys((p.read_text(encoding="utf-8") for p in paths), reference_keys())
    assert not missing, f"cited but not in docs/references.md: {missing}"


# ---------------------------------------------------------------------------- the rule can fail
SYNTHETIC = textwrap.dedent('''
    import pytest

    def test_silent():
        assert 2 + 2 == 4

    # Kaw (2006) Table 2.1
    @pytest.mark.parametrize("x", [1])
    def test_comment_above(x):
        assert x == 1

    def test_docstring():
        """Worked example of [Kaw2006]."""
        assert True

    def test_inside():
        value = 3.0
        assert value == pytest.approx(3.0)  # from memory

    def test_library():
        # numpy.fft is the reference
        assert True

    def test_errors_only():
        with pytest.raises(ValueError, match="bad") as info:
            int("bad")
        assert "bad" in str(info.value)

    def test_error_and_number():
        with pytest.raises(ValueError):
            int("bad")
        assert 1.0 == pytest.approx(1.0)

    def test_plumbing():
        # not a physics check: dtype of the output only
        assert True

    def test_key_unknown():
        # [Nobody1999] is not an entry; np.fft in code names nothing
        import numpy as np
        assert np.fft.fft([1.0])[0] == 1.0

    def test_year_without_author():
        # 2000 frames at 12.5 % duty
        assert True
''')


def test_scan_lists_what_names_no_source():
    named, exempt, unnamed = scan(SYNTHETIC, frozenset({"Kaw2006"}))
    assert unnamed == ["test_silent", "test_error_and_number", "test_key_unknown", "test_year_without_author"]
    assert exempt == ["test_errors_only", "test_plumbing"]
    assert named == ["test_comment_above", "test_docstring", "test_inside", "test_library"]


def test_unknown_cited_keys_are_listed():
    texts = ["see [Kaw2006] and [JCGM101-2008]", "x = a[Nobody1999]; b[0]; [not a key 2000]"]
    assert unknown_keys(texts, {"Kaw2006", "JCGM101-2008"}) == ["Nobody1999"]
    assert unknown_keys(texts, {"Kaw2006", "JCGM101-2008", "Nobody1999"}) == []


def test_reference_keys_are_read_from_headings(tmp_path):
    p = tmp_path / "references.md"
    p.write_text("# References\n\n### [Kaw2006] Kaw, Mechanics\n\ntext [NotAKey2000]\n### [GUM2008] JCGM\n",
                 encoding="utf-8")
    assert reference_keys(p) == {"Kaw2006", "GUM2008"}
    assert reference_keys(tmp_path / "missing.md") == frozenset()


@pytest.mark.parametrize("text, found", [
    ("Kaw (2006) Table 2.1", True), ("Pan et al. (2008)", True), ("Carslaw & Jaeger 1959", True),
    ("Rife & Boorstyn, 1974", True), ("over 2000 frames", False), ("NETD 2010", False),
    ("a 1999 cycle", False),
])
def test_author_year_pattern(text, found):
    assert bool(AUTHOR_YEAR.search(text)) is found
