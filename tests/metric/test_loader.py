"""Loading and validating metric files (docs: metric-format.md).

The three ways of writing a metric must give the same g_ab. The reference is
worked by hand from the 3+1 form of metric-format.md,
ds² = −N² dt² + γ_ij (dxⁱ + βⁱ dt)(dxʲ + βʲ dt), i.e.
g_tt = −N² + γ_ij βⁱ βʲ, g_ti = γ_ij βʲ, g_ij = γ_ij,
and evaluated here with plain numpy (a deliberately naive re-implementation).
"""

from __future__ import annotations

import contextlib
import math
import signal
import time

import numpy as np
import pytest
import sympy as sp

from auditor.errors import ExpressionError, MetricFileError, UsageError
from auditor.metric import load_metric, loads_metric, parse_overrides
from auditor.metric.loader import DEFAULT_POINTS
from auditor.metric.model import Crew

HEAD = ('name = "Tanh-wall bubble"\ncoordinates = ["t", "x", "y", "z"]\n'
        "[parameters]\nv = 0.5\nR = 1.0\nsigma = 8.0\n"
        "[define]\n"
        'r_s = "sqrt((x - v*t)**2 + y**2 + z**2)"\n'
        'f = "(tanh(sigma*(r_s + R)) - tanh(sigma*(r_s - R))) / (2*tanh(sigma*R))"\n')

BUBBLE = {
    "line_element": HEAD + '[metric]\nline_element = "-dt**2 + (dx - v*f*dt)**2 + dy**2 + dz**2"\n',
    "components": HEAD + "[metric.components]\n"
                         '"t t" = "-(1 - v**2*f**2)"\n"x t" = "-v*f"\n'
                         '"x x" = "1"\n"y y" = "1"\n"z z" = "1"\n',
    "adm": HEAD + '[metric.adm]\nlapse = "1"\nshift = ["-v*f", "0", "0"]\nspatial = "identity"\n',
}

REGION = "[region]\nt = 0.0\nx = [-2.0, 2.0]\ny = [-1.0, 1.0]\nz = 0.0\n"


def numeric_g(metric, point) -> np.ndarray:
    """g_ab of ``metric`` at ``point`` (coordinate values, in file order)."""
    subs = {s: sp.Float(v, 30) for s, v in zip(metric.coord_symbols, point)}
    subs.update({s: sp.Float(v, 30) for s, v in zip(metric.param_symbols,
                                                    metric.parameter_values)})
    return np.array(metric.g.xreplace(subs).evalf(30), dtype=float)


def bubble_reference(point, v=0.5, R=1.0, sigma=8.0) -> np.ndarray:
    """The tanh-wall bubble by hand (M. Alcubierre (1994), Class. Quantum Grav. 11,
    L73, with its tanh wall profile): lapse 1, shift (−v f, 0, 0), flat slices."""
    t, x, y, z = point
    r_s = math.sqrt((x - v * t) ** 2 + y**2 + z**2)
    f = (math.tanh(sigma * (r_s + R)) - math.tanh(sigma * (r_s - R))) / (2 * math.tanh(sigma * R))
    return adm_reference(1.0, np.array([-v * f, 0.0, 0.0]), np.eye(3))


def adm_reference(lapse, shift, gamma) -> np.ndarray:
    g = np.empty((4, 4))
    g[0, 0] = -lapse**2 + shift @ gamma @ shift
    g[0, 1:] = g[1:, 0] = gamma @ shift
    g[1:, 1:] = gamma
    return g


def random_points(rng, n=6):
    pts = rng.uniform(-1.5, 1.5, size=(n, 4))
    pts[:, 0] = rng.uniform(-1.0, 1.0, size=n)
    return pts


# -- the three forms --------------------------------------------------------------

def test_three_forms_give_the_same_g_symbolically():
    metrics = {form: loads_metric(text) for form, text in BUBBLE.items()}
    assert {m.form for m in metrics.values()} == set(BUBBLE)
    reference = metrics["line_element"].g
    for form, metric in metrics.items():
        difference = (metric.g - reference).applyfunc(sp.expand)
        assert difference == sp.zeros(4, 4), form
        assert metric.g == metric.g.T


def test_three_forms_match_a_hand_evaluation_at_random_points(rng):
    metrics = [loads_metric(text) for text in BUBBLE.values()]
    for point in random_points(rng):
        expected = bubble_reference(point)
        for metric in metrics:
            # 1e-14: a few ulps of the O(1) entries (tanh evaluated twice, squared).
            np.testing.assert_allclose(numeric_g(metric, point), expected, rtol=0, atol=1e-14)


def test_general_adm_matches_components_and_the_naive_formula(rng):
    """A lapse that varies, a shift with two components and a curved 3-metric."""
    head = 'name = "ADM check"\ncoordinates = ["t", "x", "y", "z"]\n[parameters]\na = 0.3\n'
    lapse = "1 + a*x**2"
    shift = ["y/5", "0", "a*x"]
    gamma = [["2", "x/10", "0"], ["x/10", "1 + y**2", "0"], ["0", "0", "3"]]
    adm = loads_metric(head + f'[metric.adm]\nlapse = "{lapse}"\n'
                       f"shift = {list(shift)!r}\nspatial = {gamma!r}\n".replace("'", '"'))
    for point in random_points(rng):
        t, x, y, z = point
        a = 0.3
        n = 1 + a * x**2
        beta = np.array([y / 5, 0.0, a * x])
        gam = np.array([[2, x / 10, 0], [x / 10, 1 + y**2, 0], [0, 0, 3]], dtype=float)
        np.testing.assert_allclose(numeric_g(adm, point), adm_reference(n, beta, gam),
                                   rtol=1e-14, atol=1e-15)
    assert adm.lapse is not None and adm.form == "adm"


def test_line_element_cross_terms_are_split_in_half():
    m = loads_metric('name = "m"\ncoordinates = ["t", "x", "y", "z"]\n[metric]\n'
                     'line_element = "-dt**2 + 2*dt*dx + dx**2 + dy**2 + dz**2 + 6*dy*dz"\n')
    assert m.g[0, 1] == m.g[1, 0] == 1
    assert m.g[2, 3] == m.g[3, 2] == 3
    assert m.g[0, 0] == -1


def test_missing_component_pairs_are_zero_and_numbers_are_accepted():
    m = loads_metric('name = "m"\ncoordinates = ["t", "x", "y", "z"]\n[metric.components]\n'
                     '"t t" = -1\n"x x" = 1.0\n"y y" = "1"\n"z z" = "1"\n')
    assert m.g == sp.ImmutableMatrix(sp.diag(-1, 1, 1, 1))


def test_multi_line_line_element():
    m = loads_metric('name = "m"\ncoordinates = ["t", "x", "y", "z"]\n[metric]\n'
                     'line_element = """\n-dt**2\n+ dx**2\n+ dy**2 + dz**2\n"""\n')
    assert m.g == sp.ImmutableMatrix(sp.diag(-1, 1, 1, 1))


def test_g_is_written_in_internal_symbols_only():
    for text in BUBBLE.values():
        m = loads_metric(text)
        assert m.g.free_symbols <= set(m.coord_symbols) | set(m.param_symbols)
        assert all(s.is_real for s in m.g.free_symbols)
        assert all(s.is_real for s in m.user_symbols.values())


def test_display_form_keeps_definitions_as_symbols():
    m = loads_metric(BUBBLE["line_element"])
    f = m.user_symbols["f"]
    assert f in m.g_display.free_symbols
    assert [d.name for d in m.definitions] == ["r_s", "f"]
    r_s = m.user_symbols["r_s"]
    expanded_f = m.definitions[1].expanded
    assert r_s not in expanded_f.free_symbols and m.user_symbols["x"] in expanded_f.free_symbols


# -- [define] ordering ----------------------------------------------------------------

def test_a_definition_may_use_those_above_it():
    text = HEAD.replace('f = "(tanh', 'g = "2*r_s"\nf = "g/2 - r_s + (tanh') + \
        '[metric]\nline_element = "-dt**2 + (dx - v*f*dt)**2 + dy**2 + dz**2"\n'
    m = loads_metric(text)
    reference = loads_metric(BUBBLE["line_element"])
    assert (m.g - reference.g).applyfunc(sp.expand) == sp.zeros(4, 4)


def test_a_definition_may_not_use_those_below_it():
    text = ('name = "m"\ncoordinates = ["t", "x", "y", "z"]\n[define]\n'
            'f = "1 + r2/10"\nr2 = "x**2 + y**2"\n'
            '[metric]\nline_element = "-f*dt**2 + dx**2 + dy**2 + dz**2"\n')
    with pytest.raises(ExpressionError) as info:
        loads_metric(text, path="order.toml")
    assert str(info.value) == (
        "order.toml: [define.f] 'r2' is defined below 'f' in [define] at column 5 of "
        "'1 + r2/10' (a definition may use only those above it; move 'r2' above 'f')")
    assert info.value.column == 4


def test_a_definition_may_not_use_itself():
    text = ('name = "m"\ncoordinates = ["t", "x", "y", "z"]\n[define]\nf = "1 + f"\n'
            '[metric]\nline_element = "-f*dt**2 + dx**2 + dy**2 + dz**2"\n')
    with pytest.raises(ExpressionError) as info:
        loads_metric(text, path="self.toml")
    assert str(info.value) == (
        "self.toml: [define.f] definition 'f' refers to itself at column 5 of '1 + f' "
        "(a definition may use only coordinates, parameters and the definitions above it)")


def test_definition_names_are_checked_like_parameters():
    base = 'name = "m"\ncoordinates = ["t", "x", "y", "z"]\n[define]\n{}\n[metric]\n' \
           'line_element = "-dt**2 + dx**2 + dy**2 + dz**2"\n'
    for line, message in [
        ('tanh = "x"', "[define.tanh] definition 'tanh' shadows the function tanh(); "
                       "choose another name"),
        ('pi = "3"', "[define.pi] definition 'pi' shadows the constant pi; choose another name"),
        ('dy = "x"', "[define.dy] definition 'dy' looks like the differential of coordinate "
                     "'y'; choose another name"),
        ('x = "1"', "[define.x] 'x' is declared twice (already a coordinate)"),
        ('lambda = "1"', "[define.lambda] 'lambda' is a reserved word and cannot be a name"),
    ]:
        with pytest.raises(MetricFileError) as info:
            loads_metric(base.format(line), path="m.toml")
        assert str(info.value) == f"m.toml: {message}"


# -- overrides ---------------------------------------------------------------------

@pytest.fixture
def bubble_file(tmp_path):
    path = tmp_path / "bubble.toml"
    path.write_text(BUBBLE["line_element"] + REGION + "points = 9\n")
    return path


def test_set_overrides_a_parameter(bubble_file, rng):
    m = load_metric(bubble_file, overrides=parse_overrides(["v=0.25", "sigma = 2*pi"]))
    assert m.parameters == {"v": 0.25, "R": 1.0, "sigma": 2 * math.pi}
    assert m.parameter_values == (0.25, 1.0, 2 * math.pi)
    for point in random_points(rng, 3):
        np.testing.assert_allclose(numeric_g(m, point),
                                   bubble_reference(point, v=0.25, sigma=2 * math.pi),
                                   rtol=0, atol=1e-14)


def test_set_of_an_unknown_parameter_suggests(bubble_file):
    with pytest.raises(UsageError) as info:
        load_metric(bubble_file, overrides={"sigm": 2.0})
    assert str(info.value) == f"--set sigm: no parameter named 'sigm' in {bubble_file}; " \
                              "did you mean 'sigma'?"


@pytest.mark.parametrize("item, message", [
    ("v", "--set expects NAME=VALUE, got 'v'"),
    ("2v=1", "--set: '2v' is not a valid name"),
    ("v=x", "--set v: unknown name 'x' at column 1 of 'x' (declare it under [parameters] "
            "or [define])"),
    ("v=nan", "--set v: 'nan' is not a finite number at column 1 of 'nan'"),
    ("v=1/0", "--set v: division by zero at column 3 of '1/0'"),
])
def test_set_values_are_constant_expressions(item, message):
    with pytest.raises(UsageError) as info:
        parse_overrides([item])
    assert str(info.value) == message


def test_points_override(bubble_file):
    assert load_metric(bubble_file).region.points == {"x": 9, "y": 9}
    assert load_metric(bubble_file, points=5).region.points == {"x": 5, "y": 5}
    with pytest.raises(UsageError) as info:
        load_metric(bubble_file, points=1)
    assert str(info.value) == "--points must be at least 2, got 1"


def test_points_default_and_per_axis_table():
    base = BUBBLE["line_element"] + REGION
    assert loads_metric(base).region.points == {"x": DEFAULT_POINTS, "y": DEFAULT_POINTS}
    assert DEFAULT_POINTS == 41   # metric-format.md: "Default 41."
    per_axis = loads_metric(base + "points = { x = 97, y = 49 }\n").region
    assert per_axis.points == {"x": 97, "y": 49}
    partial = loads_metric(base + "points = { x = 7 }\n").region
    assert partial.points == {"x": 7, "y": DEFAULT_POINTS}
    assert loads_metric(base + "points = { x = 7 }\n", points=3).region.points == {"x": 3, "y": 3}
    with pytest.raises(MetricFileError) as info:
        loads_metric(base + 'points = { x = "7" }\n', path="p.toml")
    assert str(info.value) == ("p.toml: [region.points.x] expected an integer number of samples, "
                               "got a string '7'")


# -- region ---------------------------------------------------------------------------

def test_region_fixed_and_sampled_axes():
    r = loads_metric(BUBBLE["line_element"] + REGION).region
    assert r.fixed == {"t": 0.0, "z": 0.0}
    assert r.axes == {"x": (-2.0, 2.0), "y": (-1.0, 1.0)}
    assert r.exclude is None and r.exclude_text is None


def test_region_exclude_is_parsed_into_internal_symbols():
    text = ('name = "Schwarzschild"\ncoordinates = ["t", "r", "theta", "phi"]\n'
            "[parameters]\nM = 1.0\n[define]\nrs = \"2*M\"\n[metric.components]\n"
            '"t t" = "-(1 - rs/r)"\n"r r" = "1/(1 - rs/r)"\n"theta theta" = "r**2"\n'
            '"phi phi" = "r**2*sin(theta)**2"\n'
            "[region]\nt = 0.0\nr = [1.0, 6.0]\ntheta = 1.0\nphi = 0.0\n"
            'exclude = "1.1*rs - r"\n')
    m = loads_metric(text)
    r_int, m_int = m.coord_symbols[1], m.param_symbols[0]
    assert m.region.exclude_text == "1.1*rs - r"
    assert sp.expand(m.region.exclude - (sp.Rational(11, 5) * m_int - r_int)) == 0
    assert m.region.exclude.free_symbols == {r_int, m_int}


def test_region_needs_a_sampled_axis():
    with pytest.raises(MetricFileError) as info:
        loads_metric(BUBBLE["line_element"] + "[region]\nt = 0.0\nx = 0.0\ny = 0.0\nz = 0.0\n",
                     path="r.toml")
    assert str(info.value) == ("r.toml: [region] no sampled axis: give at least one coordinate "
                               "as [low, high]")


# -- crew --------------------------------------------------------------------------------

def test_crew_defaults():
    crew = loads_metric(BUBBLE["line_element"]).crew
    # metric-format.md, [crew]: body 2.0 m, Eulerian frame, 1.0 g, no worldline.
    assert crew == Crew(body_length_m=2.0, frame="eulerian", tidal_limit_g=1.0,
                        start=None, velocity=None, duration=None)
    empty_table = loads_metric(BUBBLE["line_element"] + "[crew]\n").crew
    assert empty_table == crew


def test_crew_worldline():
    crew = loads_metric(BUBBLE["line_element"] + "[crew]\nframe = \"static\"\n"
                        "body_length_m = 1.8\ntidal_limit_g = 0.5\n"
                        'start = { t = 0.0, x = "pi/4", y = 0.5, z = 0 }\n'
                        "velocity = [0.1, 0.2, 0.0]\nduration = 3.0\n").crew
    assert crew.frame == "static" and crew.body_length_m == 1.8 and crew.tidal_limit_g == 0.5
    assert crew.start == {"t": 0.0, "x": math.pi / 4, "y": 0.5, "z": 0.0}
    assert crew.velocity == (0.1, 0.2, 0.0) and crew.duration == 3.0


def test_crew_worldline_needs_all_three_keys():
    with pytest.raises(MetricFileError) as info:
        loads_metric(BUBBLE["line_element"] + "[crew]\nvelocity = [0.1, 0.0, 0.0]\n",
                     path="c.toml")
    assert str(info.value) == ("c.toml: [crew.start] a crew worldline needs start, velocity "
                               "and duration; missing start, duration")


# -- unknown keys --------------------------------------------------------------------------

@pytest.mark.parametrize("tail, message", [
    ("[regoin]\nt = 0.0\n", "[regoin] unknown key 'regoin' in the top level; did you mean "
                            "'region'?"),
    ('[crew]\nfrme = "static"\n', "[crew.frme] unknown key 'frme' in [crew]; did you mean "
                                  "'frame'?"),
    ("[crew]\ntidal_limit = 2.0\n", "[crew.tidal_limit] unknown key 'tidal_limit' in [crew]; "
                                    "did you mean 'tidal_limit_g'?"),
    (REGION + "pionts = 5\n", "[region.pionts] unknown key 'pionts' in [region]; did you mean "
                              "'points'?"),
    (REGION + "w = 5\n", "[region.w] unknown key 'w' in [region]; known keys: t, x, y, z, "
                         "points, exclude"),
    ("[units]\nlength = 3.0\n", "[units.length] unknown key 'length' in [units]; did you mean "
                                "'length_m'?"),
    ("sumary = 'x'\n", None),   # after [metric]: lands in [metric], see below
])
def test_unknown_keys_suggest_the_closest(tail, message):
    if message is None:
        with pytest.raises(MetricFileError) as info:
            loads_metric(BUBBLE["line_element"] + tail, path="k.toml")
        assert str(info.value) == ("k.toml: [metric.sumary] unknown key 'sumary' in [metric]; "
                                   "known keys: line_element, components, adm")
        return
    with pytest.raises(MetricFileError) as info:
        loads_metric(BUBBLE["line_element"] + tail, path="k.toml")
    assert str(info.value) == f"k.toml: {message}"


def test_misspelt_metric_keys():
    for text, message in [
        (HEAD + '[metric]\nline_elemnt = "-dt**2"\n',
         "[metric.line_elemnt] unknown key 'line_elemnt' in [metric]; did you mean "
         "'line_element'?"),
        (HEAD + '[metric.adm]\nlapse = "1"\nshfit = ["0", "0", "0"]\nspatial = "identity"\n',
         "[metric.adm.shfit] unknown key 'shfit' in [metric.adm]; did you mean 'shift'?"),
        (HEAD + '[metric.adm]\nline_element = "-dt**2"\n',
         "[metric.adm.line_element] 'line_element' belongs under [metric], not [metric.adm]"),
    ]:
        with pytest.raises(MetricFileError) as info:
            loads_metric(text, path="k.toml")
        assert str(info.value) == f"k.toml: {message}"


def test_top_level_key_after_a_table_is_explained():
    text = ('name = "m"\ncoordinates = ["t", "x", "y", "z"]\n[metric]\n'
            'line_element = "-dt**2 + dx**2 + dy**2 + dz**2"\nsummary = "late"\n')
    with pytest.raises(MetricFileError) as info:
        loads_metric(text, path="late.toml")
    assert str(info.value) == (
        "late.toml: [metric.summary] 'summary' is a top-level key but sits in [metric]: in TOML "
        "a key belongs to the last [table] above it, so put top-level keys before the first "
        "[table]")


def test_units_default_and_value():
    assert loads_metric(BUBBLE["line_element"]).length_m == 1.0
    assert loads_metric(BUBBLE["line_element"] + "[units]\nlength_m = 100\n").length_m == 100.0


def test_source_text_is_hashed_and_named():
    m = loads_metric(BUBBLE["line_element"], path="b.toml")
    import hashlib
    assert m.sha256 == hashlib.sha256(BUBBLE["line_element"].encode()).hexdigest()
    assert m.path == "b.toml" and m.name == "Tanh-wall bubble"


# -- work stays bounded ------------------------------------------------------------------

@contextlib.contextmanager
def within_seconds(limit):
    """Fail (instead of hanging the suite) if the block runs longer than ``limit``."""
    def on_alarm(signum, frame):
        raise TimeoutError(f"took longer than {limit} s")
    previous = signal.signal(signal.SIGALRM, on_alarm)
    signal.setitimer(signal.ITIMER_REAL, limit)
    try:
        yield
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, previous)


def test_large_coefficients_are_not_expanded():
    """(x + y + z + t)**256 has 2.9 million terms when expanded; reading the line
    element must not expand it."""
    text = ('name = "m"\ncoordinates = ["t", "x", "y", "z"]\n[metric]\n'
            'line_element = "-dt**2 + (1 + ((x + y + z + t)/1000)**256)*dx**2 + dy**2 + dz**2 '
            '+ (x + y + z + t)**60*dx*dy/10**100"\n')
    start = time.perf_counter()
    with within_seconds(20):
        m = loads_metric(text)
    assert time.perf_counter() - start < 20
    assert m.g[1, 2] == m.g[2, 1]
    assert m.g[1, 2].has(sp.Pow)


def test_many_terms_load():
    terms = " + ".join(f"x**{k % 7}*dx**2/{k * 1000}" for k in range(1, 301))
    text = ('name = "m"\ncoordinates = ["t", "x", "y", "z"]\n[metric]\n'
            f'line_element = "-dt**2 + dx**2 + {terms} + dy**2 + dz**2"\n')
    with within_seconds(20):
        m = loads_metric(text)
    x = m.coord_symbols[1]
    expected = 1 + sum(x ** (k % 7) / sp.Integer(k * 1000) for k in range(1, 301))
    assert sp.expand(m.g[1, 1] - expected) == 0


def test_asymmetric_spatial_entries_that_are_equal_are_accepted():
    text = HEAD + ('[metric.adm]\nlapse = "1"\nshift = ["0", "0", "0"]\n'
                   'spatial = [["1", "x*(y + 1)/10", "0"], ["x*y/10 + x/10", "1", "0"], '
                   '["0", "0", "1"]]\n')
    m = loads_metric(text)
    assert m.g[1, 2] == m.g[2, 1]


def test_many_definitions_load_in_linear_time():
    """Each definition may not use those below it; checking that must not cost
    time proportional to their number for each of them."""
    lines = "".join(f'a{k} = "a{k - 1} + {k}"\n' for k in range(1, 4001))
    text = ('name = "m"\ncoordinates = ["t", "x", "y", "z"]\n[define]\na0 = "x"\n' + lines
            + '[metric]\nline_element = "-dt**2 + (1 + a4000**2/1e14)*dx**2 + dy**2 + dz**2"\n')
    with within_seconds(30):
        m = loads_metric(text)
    x = m.coord_symbols[1]
    assert sp.expand(m.g[1, 1] - (1 + (x + 4000 * 4001 // 2) ** 2 / sp.Integer(10) ** 14)) == 0


def test_expanded_size_limit_names_the_metric_component():
    # f, a sum of 1200 terms sin(k*x), has about 4 800 nodes (legal); the
    # component uses it five times, about 24 000 nodes once substituted.
    f = " + ".join(f"sin({k}*x)" for k in range(1, 1201))
    text = ('name = "m"\ncoordinates = ["t", "x", "y", "z"]\n[define]\n'
            f'f = "{f}"\n[metric]\n'
            'line_element = "-dt**2 + (1 + f + f**2 + f**3 + f**4 + f**5)*dx**2 + dy**2 + dz**2"\n')
    with pytest.raises(MetricFileError) as info:
        loads_metric(text, path="big.toml")
    message = str(info.value)
    assert message.startswith('big.toml: [metric] the component "x x" of g has ')
    assert message.endswith("operations once definitions are substituted, more than the 20000 "
                            "accepted (a definition used n times is copied n times)")
