"""compare.html: noise per run and station with intervals, the equal-noise tests, profile differences."""
from __future__ import annotations

import numpy as np

from ..core.robust import Z95
from ..io.atomic import json_text
from ..notices import CAUTION
from ..version import __version__
from .console import p_text
from .html import png_data_uri, template_env
from .mpl import BAND, INK, LIMIT, MEASURED, new_figure, png_bytes


def _noise_fig(result):
    fig, ax = new_figure(8, 0.5 + 0.35 * sum(1 + len(r["stations"]) for r in result["runs"]))
    y = 0
    labels = []
    for r in result["runs"]:
        ax.errorbar([r["sigma"] * 1e3], [y], xerr=[[(r["sigma"] - r["ci"][0]) * 1e3], [(r["ci"][1] - r["sigma"]) * 1e3]],
                    fmt="s", color=INK, ms=5, capsize=3)
        labels.append(f"{r['tag']} ({r['dir'].split('/')[-1]}) all")
        y += 1
        for s in r["stations"]:
            if s["sigma"] is None:
                continue
            ax.errorbar([s["sigma"] * 1e3], [y], xerr=[[(s["sigma"] - s["ci"][0]) * 1e3], [(s["ci"][1] - s["sigma"]) * 1e3]],
                        fmt="o", color=MEASURED, ms=4, capsize=2)
            labels.append(f"   station {s['station']}")
            y += 1
    ax.set_yticks(range(len(labels)))
    ax.set_yticklabels(labels, fontsize=7)
    ax.invert_yaxis()
    ax.set_xlabel("vertical noise sigma (mm), 95 % intervals")
    ax.grid(alpha=0.25, lw=0.5)
    return png_bytes(fig)


def _diff_fig(p):
    pd = p["profile"]
    fig, ax = new_figure(9, 3)
    a, d, sd = pd["azimuth_deg"], pd["difference"] * 1e3, pd["difference_sd"] * 1e3
    ax.fill_between(a, d - Z95 * sd, d + Z95 * sd, color=BAND, lw=0, label="95 % band")
    ax.plot(a, d, ".", color=MEASURED, ms=3, label="difference (run minus reference)")
    ax.axhline(pd["mean_difference"] * 1e3, color=LIMIT, ls="--", lw=1, label="weighted mean")
    ax.set_xlim(0, 360)
    ax.set_xlabel("azimuth (deg)")
    ax.set_ylabel("elevation difference (mm)")
    ax.legend(fontsize=7, frameon=False)
    return png_bytes(fig)


def render_compare(result) -> str:
    pairs = []
    for p in result["pairs"]:
        n = p["noise"]
        bf = n.get("brown_forsythe", {}).get("p_value")
        eq = n.get("equivalence", {})
        pd = p["profile"]
        if "mean_difference" in pd:
            text = (f"{pd['n_common']} common bins; weighted mean difference {pd['mean_difference'] * 1e3:+.2f} mm "
                    f"+- {pd['mean_difference_se'] * 1e3:.2f} mm (1 sigma, with both datums); RMS about the mean "
                    f"{pd['rms_difference'] * 1e3:.2f} mm; consistency chi-square {p_text(pd['consistency_p'])}")
            if "rate_per_year" in pd:
                text += (f"; {pd['years']:.2f} years apart: {pd['rate_per_year'] * 1e3:+.2f} +- "
                         f"{pd['rate_per_year_se'] * 1e3:.2f} mm per year")
        else:
            text = pd.get("note", "too few common azimuths")
        pairs.append({"run": p["run"], "words": n.get("in_words", ""), "ratio": f"{n['sigma_ratio']:.3f}",
                      "ci": f"{n['ratio_ci95'][0]:.3f} - {n['ratio_ci95'][1]:.3f}", "p": p_text(n["p_value"]),
                      "bf": "-" if bf is None else p_text(bf),
                      "eq": (("yes, " if eq.get("equivalent") else "not shown, ") + p_text(eq.get("p_value"))) if eq else "-",
                      "differs": "yes" if n["noise_differs"] else "no",
                      "stations": [{"station": x["station"], "ratio": f"{x['sigma_ratio']:.3f}",
                                    "ci": f"{x['ratio_ci95'][0]:.3f} - {x['ratio_ci95'][1]:.3f}",
                                    "p": p_text(x["p_value"])} for x in n.get("stations", [])],
                      "profile_text": text, "consistency_note": pd.get("consistency_note"),
                      "diff_fig": png_data_uri(_diff_fig(p)) if "mean_difference" in pd else None})
    runs = [{"dir": r["dir"], "setup": r.get("setup") or "-", "tag": r["tag"] or "-", "date": r["date"] or "-",
             "sigma": f"{r['sigma'] * 1e3:.3f} mm", "ci": f"{r['ci'][0] * 1e3:.3f} - {r['ci'][1] * 1e3:.3f} mm",
             "dof": r["dof"]} for r in result["runs"]]
    return template_env().get_template("compare.html.j2").render(
        version=__version__, alpha=result["alpha"], margin_pct=f"{100 * result.get('margin', 0.1):.0f}",
        caution=CAUTION, pairs=pairs, runs=runs, noise_fig=png_data_uri(_noise_fig(result)))


def compare_outputs(result) -> tuple[dict, dict]:
    """({relative path: text}, compare.json mapping) of a comparison."""
    runs, pairs = result["runs"], result["pairs"]
    js = {"caution": CAUTION, "software": {"name": "chimeline", "version": __version__}, "alpha": result["alpha"],
          "equivalence_margin": result.get("margin"), "units": "m", "units_note": "all lengths in metres",
          "answers": [p["noise"].get("in_words", "") for p in pairs],
          "runs": [{"dir": r["dir"], "setup": r.get("setup", ""), "tag": r["tag"], "survey_date": r["date"],
                    "sigma": r["sigma"], "ci95": list(r["ci"]), "dof": r["dof"], "stations": r["stations"]}
                   for r in runs],
          "pairs": [{"reference": p["reference"], "run": p["run"], "same_tank": p["same_tank"], "noise": p["noise"],
                     "profile": {k: v for k, v in p["profile"].items() if not isinstance(v, np.ndarray)}} for p in pairs]}
    lines = ["# chimeline QA comparison: noise per run and station, lengths in metres", f"# Caution: {CAUTION}",
             "run,station,sigma_m,ci95_lo_m,ci95_hi_m,dof"]
    for r in runs:
        lines.append(f"{r['dir']},all,{r['sigma']!r},{r['ci'][0]!r},{r['ci'][1]!r},{r['dof']}")
        for st in r["stations"]:
            if st["sigma"] is not None:
                lines.append(f"{r['dir']},{st['station']},{st['sigma']!r},{st['ci'][0]!r},{st['ci'][1]!r},"
                             f"{st['dof']}")
    files = {"compare.json": json_text(js), "compare.csv": "\n".join(lines) + "\n",
             "compare.html": render_compare(result)}
    return files, js
