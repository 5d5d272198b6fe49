"""report.html: one self-contained page rendered from a Jinja2 template (figures embedded as PNG data URIs),
readable on screen and printable (print CSS: page break before the figures, repeated table headers)."""
from __future__ import annotations

import base64
import functools
import html

from . import figures as F
from .document import report_context
from .geometry import geometry_section_html

CSS = """
body{font-family:system-ui,-apple-system,'Segoe UI',Helvetica,Arial,sans-serif;color:#1d2b36;max-width:1080px;
margin:24px auto;padding:0 18px;line-height:1.4;font-size:14px}
h1{font-size:22px;margin:0 0 4px} h2{font-size:17px;border-bottom:1px solid #c9d1d8;padding-bottom:3px;margin-top:28px}
.sub{color:#55636f;margin:0 0 14px}
.caution{border:2px solid #1d2b36;padding:10px 14px;margin:14px 0;background:#f6f7f8}
table{border-collapse:collapse;margin:8px 0;width:100%} td,th{border-bottom:1px solid #dde3e8;padding:4px 8px;
text-align:left;vertical-align:top} th{background:#eef1f4;font-weight:600}
figure{margin:14px 0;break-inside:avoid} figure img{max-width:100%;border:1px solid #e3e7eb}
@media print{thead{display:table-header-group}}
"""


def png_data_uri(png: bytes) -> str:
    return "data:image/png;base64," + base64.b64encode(png).decode("ascii")


def embed_png(png: bytes, alt: str, name: str) -> str:
    return f'<img alt="{html.escape(alt)}" data-plot="{name}" src="{png_data_uri(png)}">'


@functools.lru_cache(maxsize=1)
def template_env():
    """The Jinja2 environment over the package's templates/ (autoescaping on)."""
    import jinja2

    return jinja2.Environment(loader=jinja2.PackageLoader("chimeline", "templates"),
                              autoescape=jinja2.select_autoescape(["html", "j2"]), undefined=jinja2.StrictUndefined,
                              trim_blocks=True, lstrip_blocks=True, keep_trailing_newline=True)


def render_report(res=None, ev=None, units="m", figures=None, resolved=None, config_source="", input_info=None,
                  title_tag="", geometry_figures=None) -> str:
    ctx = report_context(res, ev, units, figures, resolved, config_source, input_info, title_tag, png_data_uri)
    geo = getattr(res, "geometry", None) if res is not None else None
    ctx["geometry_html"] = (geometry_section_html(geo, units, geometry_figures or {}, embed_png)
                            if geo is not None else "")
    ctx.setdefault("measurement", None)
    for key in ("points", "worst", "dips", "arcs", "decimation"):
        ctx.setdefault(key, None)
    return template_env().get_template("report.html.j2").render(**ctx)


def run_figures(res, ev, units) -> dict:
    figs = {"plan": F.plan_view(res, units), "profile": F.profile_plot(res, ev, units)}
    if ev is not None:
        figs.update(out_of_plane=F.out_of_plane_plot(ev, units), deflection=F.deflection_plot(ev, units),
                    curvature=F.curvature_plot(ev, units), arcs=F.arcs_plot(ev, units))
    figs.update(noise=F.noise_plot(res, units), shell=F.shell_residual_plot(res, units))
    return figs


def evaluation_figures(ev, units) -> dict:
    return {"profile": F.survey_profile_plot(ev, units), "out_of_plane": F.out_of_plane_plot(ev, units),
            "deflection": F.deflection_plot(ev, units), "curvature": F.curvature_plot(ev, units),
            "arcs": F.arcs_plot(ev, units)}
