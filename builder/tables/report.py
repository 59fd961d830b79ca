"""`nfb report DIR`: one self-contained HTML page about a finished table.

The page has no external reference at all: the plots (matplotlib, Agg backend)
are embedded as base64 PNG ``data:`` URIs and the style sheet is inline, so the
file can be mailed or opened offline. Plots:

1. dimensions against level, per weight, trivial character: the stored dim S_k and
   dim S_k^new as points, the formulas of builder/checks/formulas.py drawn over them
   as lines;
2. the distribution of orbit degrees [K_f : Q], per weight;
3. for rational orbits without CM and with the trivial character, the distribution
   of x_p = a_p / (2 p^((k−1)/2)) over primes p ∤ N (a_p = Tr a_p, p ≤ trace_bound)
   against the Sato–Tate density (2/π)√(1 − x²);
4. Atkin–Lehner sign counts: newforms (Σ dim) per sign vector (ε_p for the primes
   p | N, increasing), grouped by the number of prime factors of N, per weight;
5. compute time per unit against level on log–log axes with the least-squares
   growth exponent b of t ≈ a·N^b (units with dim_cusp > 0 and a measured time).

Every number printed in the page's tables is in ``ReportData.numbers`` (also
embedded as JSON in ``<script type="application/json" id="nfb-report-data">``),
computed from the same DataFrames as the plots.

Characters: the space dimensions of a unit with a character χ are over Q(χ), orbit
dimensions are absolute; the summary adds up ``char_degree · dim_new`` (and
``char_degree · dim_cusp``) over the units, so that "Σ dim_new" equals the number of
newforms (Σ orbit dims) for every table. Units with
a nontrivial character are checked against the dimension formulas of Cohen–Oesterlé
(builder/checks/char_formulas.py); a table "per character order" counts units, orbits
and newforms per order of χ. Fricke signs, root numbers and Atkin–Lehner signs exist
only for the trivial character (null / empty otherwise) and are counted over it.
"""

from __future__ import annotations

import base64
import html
import io
import json
import math
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import pandas as pd

from builder.checks import formulas as F
from builder.tables.source import Source

REPORT_NAME = "report.html"


@dataclass
class ReportData:
    numbers: dict = field(default_factory=dict)
    images: list[tuple[str, str]] = field(default_factory=list)  # (title, base64 png)
    notes: list[str] = field(default_factory=list)


def _png(fig) -> str:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=96, bbox_inches="tight", metadata={"Software": None})
    import matplotlib.pyplot as plt

    plt.close(fig)
    return base64.b64encode(buf.getvalue()).decode("ascii")


def sign_vector(signs) -> str:
    """(+1, −1, …) → "+-…" (the signs of al_signs, ASCII like al_pattern)."""
    return "".join("+" if int(s) > 0 else "-" for s in signs)


def fit_exponent(levels, seconds) -> tuple[float, float] | None:
    """Least squares log t = log a + b log N; (a, b) or None with < 3 usable points."""
    x = np.asarray(levels, dtype=float)
    y = np.asarray(seconds, dtype=float)
    ok = (x > 1) & (y > 0) & np.isfinite(y)
    if ok.sum() < 3 or len(set(x[ok])) < 2:
        return None
    b, loga = np.polyfit(np.log(x[ok]), np.log(y[ok]), 1)
    return float(math.exp(loga)), float(b)


def sato_tate_samples(forms: pd.DataFrame) -> dict[int, list[float]]:
    """weight ↦ [a_p / (2 p^((k−1)/2))] over rational non-CM orbits with the trivial
    character and primes p ∤ N."""
    out: dict[int, list[float]] = {}
    trivial = forms["char_order"] == 1 if "char_order" in forms else True
    rational = forms[(forms["dim"] == 1) & (~forms["is_cm"].astype(bool)) & trivial]
    for r in rational.itertuples():
        k, N = int(r.weight), int(r.level)
        xs = out.setdefault(k, [])
        for p in F.primes_up_to(len(r.traces)):
            if N % p:
                xs.append(int(r.traces[p - 1]) / (2 * p ** ((k - 1) / 2)))
    return out


def _dims_match(sp: pd.DataFrame, k: int) -> int:
    """Units whose dim_cusp and dim_new are those of the formulas ([DS]/[Mt] for the
    trivial character, Cohen–Oesterlé and Martin's newform count for a character χ)."""
    n = 0
    for r in sp.itertuples():
        N = int(r.level)
        if int(r.char_index) == 0:
            cusp, new = F.dim_cusp(N, k), F.dim_new(N, k)
        else:
            from builder.characters import character_orbit
            from builder.checks import char_formulas as CF

            chi = character_orbit(N, int(r.char_index))
            cusp, new = CF.dim_cusp(N, k, chi), CF.dim_new(N, k, chi)
        n += int(r.dim_cusp) == cusp and int(r.dim_new) == new
    return n


def _char_orders(sp: pd.DataFrame, nf: pd.DataFrame) -> dict[str, dict[str, int]]:
    """order of χ ↦ units, units with newforms, orbits, newforms (Σ dim), by increasing order."""
    out: dict[str, dict[str, int]] = {}
    for m in sorted({int(x) for x in sp["char_order"]} | {int(x) for x in nf["char_order"]}):
        s, f = sp[sp["char_order"] == m], nf[nf["char_order"] == m]
        out[str(m)] = {
            "units": int(len(s)),
            "nonzero_units": int((s["dim_new"] > 0).sum()),
            "orbits": int(len(f)),
            "forms": int(f["dim"].sum()),
        }
    return out


def collect(src: Source) -> tuple[pd.DataFrame, pd.DataFrame, dict]:
    spaces = src.spaces()
    forms = src.newforms(
        [
            "label",
            "level",
            "weight",
            "char_index",
            "char_order",
            "orbit",
            "dim",
            "traces",
            "al_primes",
            "al_signs",
            "fricke_sign",
            "root_number",
            "is_cm",
            "lvalue_zero",
        ]
    )
    weights = sorted(int(k) for k in spaces["weight"].unique())
    num: dict = {"source": src.where, "weights": weights, "per_weight": {}}
    for k in weights:
        sp = spaces[spaces["weight"] == k]
        nf = forms[forms["weight"] == k]
        dims_ok = _dims_match(sp, k)
        degree = nf["dim"].value_counts().sort_index()
        al: dict[str, dict[str, int]] = {}
        for r in nf.itertuples():
            vec = sign_vector(r.al_signs)
            if not vec:
                continue
            al.setdefault(vec, {"orbits": 0, "forms": 0})
            al[vec]["orbits"] += 1
            al[vec]["forms"] += int(r.dim)
        secs = sp["seconds"]
        w = {
            "units": int(len(sp)),
            "level_min": int(sp["level"].min()) if len(sp) else None,
            "level_max": int(sp["level"].max()) if len(sp) else None,
            "orbits": int(len(nf)),
            "newforms": int(nf["dim"].sum()),
            # absolute: over the Galois orbit of χ (dims of the spaces are over Q(χ))
            "dim_new": int((sp["dim_new"] * sp["char_degree"]).sum()),
            "dim_cusp": int((sp["dim_cusp"] * sp["char_degree"]).sum()),
            "char_units": int((sp["char_order"] > 1).sum()),
            "char_orbits": int((nf["char_order"] > 1).sum()),
            "rational_orbits": int((nf["dim"] == 1).sum()),
            "cm_orbits": int(nf["is_cm"].astype(bool).sum()),
            "lzero_orbits": int(sum(v is True or v == 1 for v in nf["lvalue_zero"])),
            "root_minus_orbits": int((nf["root_number"] == -1).sum()),
            "fricke_plus_forms": int(nf.loc[nf["fricke_sign"] == 1, "dim"].sum()),
            "fricke_minus_forms": int(nf.loc[nf["fricke_sign"] == -1, "dim"].sum()),
            "units_matching_formulas": int(dims_ok),
            "max_degree": int(nf["dim"].max()) if len(nf) else 0,
            "degree_counts": {str(int(d)): int(c) for d, c in degree.items()},
            "al_counts": dict(sorted(al.items(), key=lambda kv: (len(kv[0]), kv[0]))),
            "compute_seconds": None if secs.isna().all() else round(float(secs.sum()), 3),
            "char_orders": _char_orders(sp, nf),
        }
        num["per_weight"][str(k)] = w
    st = sato_tate_samples(forms)
    for k in weights:
        num["per_weight"][str(k)]["sato_tate_samples"] = len(st.get(k, []))
    for k in weights:
        sp = spaces[(spaces["weight"] == k) & (spaces["dim_cusp"] > 0)]
        fit = None if sp["seconds"].isna().all() else fit_exponent(sp["level"], sp["seconds"])
        num["per_weight"][str(k)]["growth_exponent"] = None if fit is None else round(fit[1], 3)
    num["units"] = int(len(spaces))
    num["orbits"] = int(len(forms))
    return spaces, forms, num


# ----------------------------------------------------------------------------- plots


def _plots(spaces: pd.DataFrame, forms: pd.DataFrame, num: dict) -> ReportData:
    try:
        import matplotlib
    except ImportError:
        from builder.pipeline.errors import BadInput

        raise BadInput(
            "command line", None, "nfb report needs matplotlib: pip install 'nfb[report]'"
        ) from None

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    data = ReportData(numbers=num)
    weights = num["weights"]
    ncol = max(1, len(weights))

    # 1. dimensions against level, with the formulas
    fig, axes = plt.subplots(1, ncol, figsize=(5.2 * ncol, 3.8), squeeze=False)
    for ax, k in zip(axes[0], weights, strict=True):
        sp = spaces[(spaces["weight"] == k) & (spaces["char_index"] == 0)]
        if len(sp):
            lo, hi = int(sp["level"].min()), int(sp["level"].max())
            xs = np.arange(lo, hi + 1)
            ax.plot(
                xs,
                [F.dim_cusp(int(n), k) for n in xs],
                "-",
                color="#9bb7d4",
                lw=1.2,
                label="dim S_k formula [DS]",
                zorder=1,
            )
            ax.plot(
                xs,
                [F.dim_new(int(n), k) for n in xs],
                "-",
                color="#e8a07a",
                lw=1.2,
                label="dim S_k^new formula [Mt]",
                zorder=1,
            )
            ax.scatter(
                sp["level"], sp["dim_cusp"], s=9, color="#1f4e79", label="stored dim_cusp", zorder=2
            )
            ax.scatter(
                sp["level"], sp["dim_new"], s=9, color="#b3410e", label="stored dim_new", zorder=3
            )
        ax.set_title(f"weight {k}, trivial character: dimensions against level")
        ax.set_xlabel("level N")
        ax.set_ylabel("dimension")
        ax.legend(fontsize=7, loc="upper left")
    data.images.append(("Dimensions against level, with the formulas drawn over them", _png(fig)))

    # 2. orbit degree distribution
    fig, axes = plt.subplots(1, ncol, figsize=(5.2 * ncol, 3.4), squeeze=False)
    for ax, k in zip(axes[0], weights, strict=True):
        counts = num["per_weight"][str(k)]["degree_counts"]
        ds_ = [int(d) for d in counts]
        ax.bar(ds_, [counts[str(d)] for d in ds_], color="#4c72b0")
        ax.set_title(f"weight {k}: orbit degrees [K_f : Q]")
        ax.set_xlabel("degree of the coefficient field")
        ax.set_ylabel("orbits")
        if ds_ and max(counts.values()) > 50 * max(1, min(counts.values())):
            ax.set_yscale("log")
    data.images.append(("Orbit degree distribution", _png(fig)))

    # 3. Sato–Tate
    st = sato_tate_samples(forms)
    fig, axes = plt.subplots(1, ncol, figsize=(5.2 * ncol, 3.4), squeeze=False)
    xs = np.linspace(-1, 1, 401)
    for ax, k in zip(axes[0], weights, strict=True):
        sample = st.get(k, [])
        if sample:
            ax.hist(
                sample,
                bins=24,
                range=(-1, 1),
                density=True,
                color="#8fbc8f",
                edgecolor="white",
                label=f"{len(sample)} values a_p/(2p^((k−1)/2))",
            )
        ax.plot(
            xs,
            (2 / np.pi) * np.sqrt(1 - xs**2),
            color="#8b0000",
            lw=1.6,
            label="Sato–Tate (2/π)√(1−x²)",
        )
        ax.set_title(f"weight {k}: rational orbits without CM, χ = 1, p ∤ N")
        ax.set_xlabel("x = a_p / (2 p^((k−1)/2))")
        ax.set_ylabel("density")
        ax.set_xlim(-1, 1)
        ax.legend(fontsize=7, loc="lower center")
    data.images.append(("Sato–Tate: normalised a_p of rational orbits", _png(fig)))

    # 4. Atkin–Lehner sign counts
    fig, axes = plt.subplots(1, ncol, figsize=(5.6 * ncol, 3.6), squeeze=False)
    for ax, k in zip(axes[0], weights, strict=True):
        al = num["per_weight"][str(k)]["al_counts"]
        names = list(al)
        colors = ["#4c72b0", "#dd8452", "#55a868", "#c44e52", "#8172b3"]
        ax.bar(
            range(len(names)),
            [al[n]["forms"] for n in names],
            color=[colors[(len(n) - 1) % len(colors)] for n in names],
        )
        ax.set_xticks(range(len(names)))
        ax.set_xticklabels(names, rotation=90 if len(names) > 14 else 0, fontsize=8)
        ax.set_title(f"weight {k}: newforms per Atkin–Lehner sign vector")
        ax.set_xlabel("(ε_p) for p | N, p increasing (colour = number of primes)")
        ax.set_ylabel("newforms (Σ dim)")
    data.images.append(("Atkin–Lehner sign counts", _png(fig)))

    # 5. compute time against level
    timed = spaces[(spaces["dim_cusp"] > 0) & spaces["seconds"].notna() & (spaces["seconds"] > 0)]
    if len(timed):
        fig, ax = plt.subplots(figsize=(6.4, 4.2))
        for k, color in zip(
            weights, ["#1f77b4", "#d62728", "#2ca02c", "#9467bd", "#8c564b"], strict=False
        ):
            sp = timed[timed["weight"] == k]
            if not len(sp):
                continue
            ax.scatter(sp["level"], sp["seconds"], s=9, color=color, alpha=0.7)
            b = num["per_weight"][str(k)]["growth_exponent"]
            fit = fit_exponent(sp["level"], sp["seconds"])
            label = f"weight {k}" + ("" if b is None else f": t ≈ {fit[0]:.2g}·N^{b:.2f}")
            if fit is not None:
                xs_ = np.geomspace(max(2, sp["level"].min()), sp["level"].max(), 50)
                ax.plot(xs_, fit[0] * xs_ ** fit[1], color=color, lw=1.4, label=label)
            else:
                ax.plot([], [], color=color, label=label)
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.set_xlabel("level N")
        ax.set_ylabel("compute seconds per unit")
        ax.set_title("compute time per unit (log–log) and fitted growth exponent")
        ax.legend(fontsize=8)
        data.images.append(("Compute time per unit against level", _png(fig)))
    else:
        data.notes.append(
            "No compute times in this table (an export written with --no-timings): "
            "the timing plot is left out."
        )
    return data


# ----------------------------------------------------------------------------- HTML

CSS = """
body { font-family: system-ui, -apple-system, 'Segoe UI', sans-serif; margin: 2rem auto;
       max-width: 1200px; color: #222; padding: 0 1rem; }
h1 { font-size: 1.6rem; } h2 { font-size: 1.2rem; margin-top: 2rem; }
table { border-collapse: collapse; margin: 0.5rem 0 1rem; font-size: 0.9rem; }
th, td { border: 1px solid #ccc; padding: 0.25rem 0.6rem; text-align: right; }
th { background: #f0f3f7; } td.name, th.name { text-align: left; }
figure { margin: 1rem 0 2rem; } figcaption { font-size: 0.9rem; color: #555; }
img { max-width: 100%; height: auto; border: 1px solid #eee; }
.note { color: #8a5300; } code { background: #f4f4f4; padding: 0 0.2rem; }
"""

ROWS = [
    ("units", "units (N, k, χ) stored as done"),
    ("char_units", "units with a nontrivial character χ"),
    ("levels", "levels"),
    ("orbits", "Galois orbits of newforms"),
    ("char_orbits", "orbits with a nontrivial character χ"),
    ("newforms", "newforms (Σ orbit dimensions)"),
    ("dim_new", "Σ char_degree · dim_new of the spaces"),
    ("dim_cusp", "Σ char_degree · dim_cusp of the spaces"),
    ("units_matching_formulas", "units whose dim_cusp and dim_new match the formulas"),
    ("rational_orbits", "rational orbits (dim 1)"),
    ("max_degree", "largest orbit degree"),
    ("cm_orbits", "orbits with CM"),
    ("root_minus_orbits", "orbits with root number −1 (trivial χ)"),
    ("lzero_orbits", "orbits with L(f, k/2) = 0"),
    ("fricke_plus_forms", "newforms with Fricke sign +1 (trivial χ)"),
    ("fricke_minus_forms", "newforms with Fricke sign −1 (trivial χ)"),
    ("sato_tate_samples", "Sato–Tate sample size (a_p, p ∤ N, rational non-CM, trivial χ)"),
    ("growth_exponent", "fitted growth exponent b of compute time ≈ a·N^b"),
    ("compute_seconds", "total compute seconds"),
]


def _cell(key: str, value) -> str:
    shown = "—" if value is None else str(value)
    return f'<td data-key="{html.escape(key)}">{html.escape(shown)}</td>'


def render_html(data: ReportData, title: str) -> str:
    num = data.numbers
    weights = num["weights"]
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{html.escape(title)}</title>",
        f"<style>{CSS}</style></head><body>",
        f"<h1>{html.escape(title)}</h1>",
        f"<p>Source: <code>{html.escape(str(num['source']))}</code>; "
        f"{num['units']} units, {num['orbits']} newform orbits; weights "
        f"{', '.join(map(str, weights))}. Generated "
        f"{datetime.now(UTC).strftime('%Y-%m-%d %H:%M UTC')} by <code>nfb report</code>."
        "</p>",
        "<h2>Summary</h2>",
        '<table id="summary"><thead><tr><th class="name">quantity</th>'
        + "".join(f"<th>weight {k}</th>" for k in weights)
        + "</tr></thead><tbody>",
    ]
    for key, text in ROWS:
        cells = []
        for k in weights:
            w = num["per_weight"][str(k)]
            if key == "levels":
                v = f"{w['level_min']}–{w['level_max']}" if w["units"] else None
            else:
                v = w.get(key)
            cells.append(_cell(f"w{k}.{key}", v))
        parts.append(f'<tr><td class="name">{html.escape(text)}</td>{"".join(cells)}</tr>')
    parts.append("</tbody></table>")

    parts.append("<h2>Atkin–Lehner sign vectors</h2>")
    parts.append(
        "<p>Newforms (Σ dim) and orbits per vector (ε_p) over the primes p | N in increasing "
        "order.</p>"
    )
    for k in weights:
        al = num["per_weight"][str(k)]["al_counts"]
        parts.append(
            f'<table class="al" data-weight="{k}"><thead><tr><th class="name">weight {k}</th>'
            "<th>newforms</th><th>orbits</th></tr></thead><tbody>"
        )
        for vec, c in al.items():
            parts.append(
                f'<tr><td class="name">{html.escape(vec)}</td>'
                + _cell(f"w{k}.al.{vec}.forms", c["forms"])
                + _cell(f"w{k}.al.{vec}.orbits", c["orbits"])
                + "</tr>"
            )
        parts.append("</tbody></table>")

    parts.append("<h2>Per character order</h2>")
    parts.append(
        "<p>Units, units with newforms, orbits and newforms (Σ dim, absolute) per order of "
        "the character χ (order 1 = the trivial character).</p>"
    )
    for k in weights:
        co = num["per_weight"][str(k)]["char_orders"]
        parts.append(
            f'<table class="char-orders" data-weight="{k}"><thead><tr>'
            f'<th class="name">weight {k}: order of χ</th><th>units</th>'
            "<th>units with newforms</th><th>orbits</th><th>newforms</th></tr></thead><tbody>"
        )
        for m, c in co.items():
            parts.append(
                f'<tr><td class="name">{html.escape(m)}</td>'
                + "".join(
                    _cell(f"w{k}.char.{m}.{key}", c[key])
                    for key in ("units", "nonzero_units", "orbits", "forms")
                )
                + "</tr>"
            )
        parts.append("</tbody></table>")

    parts.append("<h2>Orbit degrees</h2>")
    for k in weights:
        dc = num["per_weight"][str(k)]["degree_counts"]
        parts.append(
            f'<table class="degrees" data-weight="{k}"><thead><tr><th class="name">weight {k}: '
            "degree</th>" + "".join(f"<th>{d}</th>" for d in dc) + "</tr></thead><tbody>"
            '<tr><td class="name">orbits</td>'
            + "".join(_cell(f"w{k}.degree.{d}", c) for d, c in dc.items())
            + "</tr></tbody></table>"
        )

    parts.append("<h2>Plots</h2>")
    for i, (caption, b64) in enumerate(data.images, start=1):
        parts.append(
            f'<figure><img id="plot-{i}" alt="{html.escape(caption)}" '
            f'src="data:image/png;base64,{b64}"><figcaption>Figure {i}. '
            f"{html.escape(caption)}</figcaption></figure>"
        )
    for note in data.notes:
        parts.append(f'<p class="note">{html.escape(note)}</p>')
    parts.append(
        '<script type="application/json" id="nfb-report-data">'
        + json.dumps(num, sort_keys=True).replace("</", "<\\/")
        + "</script>"
    )
    parts.append("</body></html>")
    return "\n".join(parts) + "\n"


def build_report(src: Source, path: str | Path, title: str | None = None) -> ReportData:
    """Write the HTML report for ``src`` to ``path``; returns what it shows."""
    spaces, forms, num = collect(src)
    data = _plots(spaces, forms, num)
    text = render_html(data, title or "nfb table report")
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.tmp")
    tmp.write_text(text, encoding="utf-8")
    tmp.replace(path)
    return data
