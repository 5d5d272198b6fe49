"""compare.html: noise per run and station with intervals, the equal-noise tests, profile differences."""
from __future__ import annotations

import html

import numpy as np

from ..core.robust import Z95
from ..io.atomic import json_text
from .html import CSS, embed_png
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
    e = html.escape
    out = ["<!doctype html><html lang='en'><head><meta charset='utf-8'><title>chimeline compare</title>",
           f"<style>{CSS}</style></head><body><h1>Scanner setup comparison</h1>",
           "<div class='caution'><b>Caution.</b> QA figures assist a qualified engineer; they are not a "
           "fitness-for-service determination.</div>",
           "<h2>Noise per run</h2><table><tr><th>run</th><th>tag</th><th>date</th><th>sigma</th><th>95 % CI</th><th>dof</th></tr>"]
    for r in result["runs"]:
        out.append(f"<tr><td>{e(r['dir'])}</td><td>{e(r['tag'])}</td><td>{e(r['date'])}</td><td>{r['sigma'] * 1e3:.3f} mm</td>"
                   f"<td>{r['ci'][0] * 1e3:.3f} - {r['ci'][1] * 1e3:.3f} mm</td><td>{r['dof']}</td></tr>")
    out.append("</table>")
    out.append(f"<figure>{embed_png(_noise_fig(result), 'noise per run and station', 'noise')}</figure>")
    out.append("<h2>Tests against the reference (first run)</h2><table><tr><th>run</th><th>sigma ratio</th>"
               "<th>95 % CI</th><th>F test p</th><th>Brown-Forsythe p</th><th>noise differs</th></tr>")
    for p in result["pairs"]:
        n = p["noise"]
        bf = n.get("brown_forsythe", {}).get("p_value")
        out.append(f"<tr><td>{e(p['run'])}</td><td>{n['sigma_ratio']:.3f}</td><td>{n['ratio_ci95'][0]:.3f} - "
                   f"{n['ratio_ci95'][1]:.3f}</td><td>{n['p_value']:.3g}</td><td>{'-' if bf is None else f'{bf:.3g}'}</td>"
                   f"<td>{'yes' if n['noise_differs'] else 'no'}</td></tr>")
    out.append("</table>")
    for p in result["pairs"]:
        pd = p["profile"]
        if "mean_difference" not in pd:
            out.append(f"<p>{e(p['run'])}: {e(pd.get('note', 'too few common azimuths'))}</p>")
            continue
        out.append(f"<h2>Profile difference: {e(p['run'])} minus reference</h2>"
                   f"<p>{pd['n_common']} common bins; weighted mean {pd['mean_difference'] * 1e3:.2f} mm "
                   f"&plusmn; {pd['mean_difference_se'] * 1e3:.2f} mm (1 sigma, with both datums); RMS about the mean "
                   f"{pd['rms_difference'] * 1e3:.2f} mm; consistency chi-square p = {pd['consistency_p']:.3g}"
                   + (f"; {pd['years']:.2f} years apart: {pd['rate_per_year'] * 1e3:.2f} &plusmn; "
                      f"{pd['rate_per_year_se'] * 1e3:.2f} mm per year" if "rate_per_year" in pd else "") + "</p>")
        out.append(f"<figure>{embed_png(_diff_fig(p), 'profile difference', 'difference')}</figure>")
    out.append("</body></html>")
    return "\n".join(out)


def compare_outputs(result) -> tuple[dict, dict]:
    """({relative path: text}, compare.json mapping) of a comparison."""
    runs, pairs = result["runs"], result["pairs"]
    js = {"alpha": result["alpha"], "units_note": "all lengths in metres",
          "runs": [{"dir": r["dir"], "tag": r["tag"], "survey_date": r["date"], "sigma": r["sigma"], "ci95": list(r["ci"]),
                    "dof": r["dof"], "stations": r["stations"]} for r in runs],
          "pairs": [{"reference": p["reference"], "run": p["run"], "same_tank": p["same_tank"], "noise": p["noise"],
                     "profile": {k: v for k, v in p["profile"].items() if not isinstance(v, np.ndarray)}} for p in pairs]}
    lines = ["run,station,sigma_m,ci95_lo_m,ci95_hi_m,dof"]
    for r in runs:
        lines.append(f"{r['dir']},all,{r['sigma']:.7f},{r['ci'][0]:.7f},{r['ci'][1]:.7f},{r['dof']}")
        for st in r["stations"]:
            if st["sigma"] is not None:
                lines.append(f"{r['dir']},{st['station']},{st['sigma']:.7f},{st['ci'][0]:.7f},{st['ci'][1]:.7f},"
                             f"{st['dof']}")
    files = {"compare.json": json_text(js), "compare.csv": "\n".join(lines) + "\n",
             "compare.html": render_compare(result)}
    return files, js
