"""`nfb report`: a self-contained page that renders in real headless Chromium, and whose
numbers are those of the table.

The browser test is skipped with the reason when Chromium is missing, and fails
instead with NFB_REQUIRE_SERVICES=1 (as in .ci/run, which installs the Debian
packages chromium and chromium-driver).
"""

from __future__ import annotations

import html
import json
import re
import shutil
from html.parser import HTMLParser

import numpy as np
import pytest

from builder.checks import formulas as F
from tests.nfb_helpers import run_nfb
from tests.tables_helpers import (
    char_table,
    chromium_run,
    need_chromium,
    read_export,
    small_table,
)

N_PLOTS = 5


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    table = small_table(tmp_path_factory)
    out = tmp_path_factory.mktemp("report") / "t"
    shutil.copytree(table, out)
    r = run_nfb("report", out)
    assert r.returncode == 0, r.stdout + r.stderr
    path = out / "report.html"
    assert path.exists() and f"{N_PLOTS} plots" in r.stdout
    return out, path


class _Cells(HTMLParser):
    """data-key cells, <img> sources, external references, the embedded JSON."""

    def __init__(self) -> None:
        super().__init__()
        self.cells: dict[str, str] = {}
        self.imgs: list[str] = []
        self.refs: list[str] = []
        self._key: str | None = None
        self._json = False
        self.json_text = ""

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if "data-key" in a:
            self._key = a["data-key"]
            self.cells[self._key] = ""
        if tag == "img":
            self.imgs.append(a.get("src", ""))
        for name in ("src", "href"):
            if name in a and not (a[name] or "").startswith("data:"):
                self.refs.append(a[name])
        if tag == "script" and a.get("id") == "nfb-report-data":
            self._json = True

    def handle_endtag(self, tag):
        if tag == "td":
            self._key = None
        if tag == "script":
            self._json = False

    def handle_data(self, data):
        if self._key is not None:
            self.cells[self._key] += data
        if self._json:
            self.json_text += data


def _parse(text: str) -> _Cells:
    p = _Cells()
    p.feed(text)
    return p


def _expected(out):
    """The report's numbers recomputed here with plain pandas from the export."""
    sp, nf, _ = read_export(out)
    want = {}
    for k in (2, 4):
        s, f = sp[sp.weight == k], nf[nf.weight == k]
        rational = f[(f.dim == 1) & ~f.is_cm.astype(bool)]
        st = sum(
            1 for r in rational.itertuples() for p in F.primes_up_to(len(r.traces)) if r.level % p
        )
        al: dict[str, list[int]] = {}
        for r in f.itertuples():
            vec = "".join("+" if x > 0 else "-" for x in r.al_signs)
            if vec:
                al.setdefault(vec, [0, 0])
                al[vec][0] += int(r.dim)
                al[vec][1] += 1
        want[k] = {
            "units": len(s),
            "levels": f"{s.level.min()}–{s.level.max()}",
            "orbits": len(f),
            "newforms": int(f.dim.sum()),
            "dim_new": int(s.dim_new.sum()),
            "dim_cusp": int(s.dim_cusp.sum()),
            "rational_orbits": int((f.dim == 1).sum()),
            "cm_orbits": int(f.is_cm.sum()),
            "lzero_orbits": int((f.lvalue_zero == True).sum()),  # noqa: E712
            "root_minus_orbits": int((f.root_number == -1).sum()),
            "fricke_plus_forms": int(f[f.fricke_sign == 1].dim.sum()),
            "fricke_minus_forms": int(f[f.fricke_sign == -1].dim.sum()),
            "max_degree": int(f.dim.max()),
            "sato_tate_samples": st,
            "units_matching_formulas": len(s),
            "al": al,
            "degrees": {int(d): int(c) for d, c in f.dim.value_counts().items()},
        }
        t = s[(s.dim_cusp > 0) & (s.seconds > 0)]
        b = np.polyfit(np.log(t.level.astype(float)), np.log(t.seconds), 1)[0]
        want[k]["growth_exponent"] = round(float(b), 3)
    return want


def _check_numbers(cells: dict[str, str], want) -> None:
    for k, w in want.items():
        for key in (
            "units", "levels", "orbits", "newforms", "dim_new", "dim_cusp", "rational_orbits",
            "cm_orbits", "lzero_orbits", "root_minus_orbits", "fricke_plus_forms",
            "fricke_minus_forms", "max_degree", "sato_tate_samples", "units_matching_formulas",
        ):  # fmt: skip
            assert cells[f"w{k}.{key}"].strip() == str(w[key]), (k, key)
        assert float(cells[f"w{k}.growth_exponent"]) == pytest.approx(
            w["growth_exponent"], abs=2e-3
        )
        for vec, (forms, orbits) in w["al"].items():
            assert int(cells[f"w{k}.al.{vec}.forms"]) == forms, (k, vec)
            assert int(cells[f"w{k}.al.{vec}.orbits"]) == orbits, (k, vec)
        assert {key for key in cells if key.startswith(f"w{k}.al.") and key.endswith(".forms")} == {
            f"w{k}.al.{v}.forms" for v in w["al"]
        }
        for d, c in w["degrees"].items():
            assert int(cells[f"w{k}.degree.{d}"]) == c


def test_report_is_self_contained_and_matches_the_table(report):
    out, path = report
    text = path.read_text(encoding="utf-8")
    p = _parse(text)
    assert p.refs == [], p.refs  # no external file, script, style sheet or link
    assert "http://" not in text and "https://" not in text
    assert len(p.imgs) == N_PLOTS
    assert all(src.startswith("data:image/png;base64,") for src in p.imgs)
    import base64

    for src in p.imgs:
        png = base64.b64decode(src.split(",", 1)[1])
        assert png[:8] == b"\x89PNG\r\n\x1a\n" and len(png) > 5000
    want = _expected(out)
    _check_numbers(p.cells, want)
    data = json.loads(p.json_text)
    assert data["units"] == 80 and data["orbits"] == sum(w["orbits"] for w in want.values())
    assert data["per_weight"]["2"]["al_counts"] == {
        v: {"forms": f, "orbits": o} for v, (f, o) in want[2]["al"].items()
    }


CHECK_JS = """
<script>
window.addEventListener('load', function () {
  var imgs = Array.prototype.slice.call(document.images);
  var res = imgs.map(function (im) {
    return {id: im.id, complete: im.complete, w: im.naturalWidth, h: im.naturalHeight};
  });
  var pre = document.createElement('pre');
  pre.id = 'nfb-test-result';
  pre.textContent = 'NFB-IMAGES ' + JSON.stringify(res) + ' NFB-END';
  document.body.appendChild(pre);
});
</script>
"""


def test_report_renders_in_chromium(report, tmp_path):
    exe = need_chromium()
    _, path = report
    # the test's own copy with a check script appended; the report itself has no script
    page = tmp_path / "page.html"
    page.write_text(path.read_text(encoding="utf-8").replace("</body>", CHECK_JS + "</body>"))
    dom = chromium_run(
        exe, tmp_path / "profile", "--virtual-time-budget=10000", "--dump-dom", page.as_uri()
    )
    m = re.search(r'<pre id="nfb-test-result">NFB-IMAGES (.*?) NFB-END</pre>', dom, re.S)
    assert m, dom[-2000:]
    images = json.loads(html.unescape(m.group(1)))
    assert len(images) == N_PLOTS
    for im in images:
        assert im["complete"] and im["w"] > 200 and im["h"] > 100, im
    # the numbers as the browser shows them
    _check_numbers(_parse(dom).cells, _expected(report[0]))
    # and a screenshot that is not blank
    shot = tmp_path / "shot.png"
    chromium_run(
        exe, tmp_path / "profile2", "--window-size=1280,2400", f"--screenshot={shot}",
        path.as_uri(),
    )  # fmt: skip
    import matplotlib.image as mpimg

    pixels = mpimg.imread(shot)
    assert pixels.shape[0] >= 2000 and pixels.shape[1] >= 1200
    assert float(pixels[..., :3].std()) > 0.05


def test_report_bad_input(tmp_path):
    r = run_nfb("report", tmp_path / "nothing")
    assert r.returncode == 2 and "no nfb table here" in r.stderr


# ----------------------------------------------------------------------------- characters


@pytest.mark.parametrize("kind", ["sqlite", "parquet"])
def test_report_with_characters(tmp_path_factory, tmp_path, kind):
    """A table with nontrivial characters (null Fricke signs and root numbers, empty
    Atkin–Lehner signs, odd weight): the page is written, and its per-character-order
    table and summary agree with plain pandas on the export."""
    table = char_table(tmp_path_factory)
    where = ["--parquet", table / "parquet"] if kind == "parquet" else [table]
    to = tmp_path / "report.html"
    r = run_nfb("report", *where, "--to", to)
    assert r.returncode == 0, r.stdout + r.stderr
    p = _parse(to.read_text(encoding="utf-8"))
    assert len(p.imgs) == N_PLOTS and p.refs == []
    sp, nf, _ = read_export(table)
    cells = p.cells
    for k in sorted(set(sp.weight)):
        s, f = sp[sp.weight == k], nf[nf.weight == k]
        assert cells[f"w{k}.units"] == str(len(s))
        assert cells[f"w{k}.char_units"] == str(int((s.char_order > 1).sum()))
        assert cells[f"w{k}.char_orbits"] == str(int((f.char_order > 1).sum()))
        # Σ orbit dims (absolute) = Σ char_degree · dim_new (record contract, per unit)
        assert cells[f"w{k}.newforms"] == cells[f"w{k}.dim_new"] == str(int(f.dim.sum()))
        # the stored dims agree with the formulas: [DS]/[Mt] for χ = 1, Cohen–Oesterlé and
        # Martin's newform count for the characters (builder/checks/char_formulas.py)
        assert cells[f"w{k}.units_matching_formulas"] == str(len(s))
        assert cells[f"w{k}.fricke_plus_forms"] == str(int(f[f.fricke_sign == 1].dim.sum()))
        assert cells[f"w{k}.root_minus_orbits"] == str(int((f.root_number == -1).sum()))
        for m in sorted(set(s.char_order)):
            sm, fm = s[s.char_order == m], f[f.char_order == m]
            assert cells[f"w{k}.char.{m}.units"] == str(len(sm))
            assert cells[f"w{k}.char.{m}.nonzero_units"] == str(int((sm.dim_new > 0).sum()))
            assert cells[f"w{k}.char.{m}.orbits"] == str(len(fm))
            assert cells[f"w{k}.char.{m}.forms"] == str(int(fm.dim.sum()))
    data = json.loads(p.json_text)
    assert data["per_weight"]["3"]["char_orders"]["4"] == {
        "units": 2, "nonzero_units": 1, "orbits": 1, "forms": 6,  # 16w3c4-1: dim 6 = 2 · 3
    }  # fmt: skip
