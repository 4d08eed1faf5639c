"""`cloakrcs image MANIFEST --target NAME --out DIR`: calibrated ISAR image and scattering centres.

Writes DIR/scatterers.csv, DIR/image.nc and DIR/image.html (README, "Imaging"). ``--run RUN_ID``
images a stored run instead of processing a manifest.
"""

from __future__ import annotations

from ..errors import InputError


def register(sub) -> None:
    p = sub.add_parser("image", help="calibrated ISAR image and scattering centres of one target")
    p.add_argument("manifest", nargs="?", help="campaign manifest (TOML); or give --run")
    p.add_argument("--run", type=int, metavar="RUN_ID", help="image a stored run instead of a manifest")
    p.add_argument("--target", required=True, help="target to image (a subject)")
    p.add_argument("--pol", help="polarization (default VV when measured, else the first)")
    p.add_argument("--sector-deg", help="sector START:STOP in degrees (default: every angle when they span at "
                                        "most 60 deg, else -15:15)")
    p.add_argument("--band-ghz", help="band START:STOP in GHz within the valid band (default: the reporting band)")
    p.add_argument("--scatterers", type=int, default=10, metavar="N", help="strongest scattering centres to list")
    p.add_argument("--out", required=True, help="output folder")
    p.add_argument("--method", choices=("auto", "polar", "backprojection"), default="auto",
                   help="polar format, back-projection, or auto (polar up to a 30 deg sector)")
    p.add_argument("--window", choices=("kaiser", "taylor", "hann", "rect"), default="kaiser",
                   help="window in frequency and angle (default kaiser)")
    p.add_argument("--kaiser-beta", type=float, default=6.0, help="Kaiser beta (default 6)")
    p.add_argument("--taylor-nbar", type=int, default=4, help="Taylor nbar (default 4)")
    p.add_argument("--taylor-sll-db", type=float, default=35.0, help="Taylor sidelobe level, dB (default 35)")
    p.add_argument("--pad", type=int, default=4, help="zero padding of the image FFT (default 4)")
    p.add_argument("--extent-m", help="scene size DOWN:CROSS in m (default: the gate span, and the angular step's "
                                      "unambiguous cross-range if smaller)")
    p.add_argument("--against", metavar="NAME", help="target for the difference image (default: the target's baseline)")
    p.add_argument("--dynamic-db", type=float, default=40.0, help="dynamic range shown in image.html (dB)")
    p.add_argument("--store", metavar="URL", help="results store for --run (default: CLOAKRCS_STORE or the per-user file)")
    p.set_defaults(func=run)


def _pair(text: str, flag: str, scale: float = 1.0) -> tuple[float, float]:
    try:
        a, b = (float(x) * scale for x in text.split(":"))
    except ValueError:
        raise InputError(f"{flag} {text!r}: expected START:STOP") from None
    return a, b


def _load(args):
    if (args.manifest is None) == (args.run is None):
        raise InputError("give either a MANIFEST or --run RUN_ID")
    if args.run is not None:
        from .. import store

        return store.load_result(store.resolve_url(args.store), args.run)["result"]
    from ..campaign import load_campaign
    from ..process import process_campaign

    return process_campaign(load_campaign(args.manifest))


def run(args) -> int:
    from dataclasses import replace

    import pandas as pd

    from .. import imaging, outputs
    from ..metrics import parse_sector

    if args.scatterers < 1:
        raise InputError(f"--scatterers must be at least 1, got {args.scatterers}")
    settings = imaging.ImageSettings(method=args.method, window=args.window, kaiser_beta=args.kaiser_beta,
                                     taylor_nbar=args.taylor_nbar, taylor_sll_db=args.taylor_sll_db,
                                     pad_factor=args.pad,
                                     extent_m=_pair(args.extent_m, "--extent-m") if args.extent_m else None).checked()
    sector = parse_sector(args.sector_deg) if args.sector_deg else None
    band = _pair(args.band_ghz, "--band-ghz", 1e9) if args.band_ghz else None
    result = _load(args)
    if args.target in result.targets and result.targets[args.target].role == "background":
        raise InputError(f"{args.target} is a background: image a subject")
    settings = replace(settings, floor_margin_db=result.settings.get("floor_margin_db", 10.0))
    img = imaging.image_of_result(result, args.target, args.pol, sector, band, settings)
    other = args.against or (result.targets[args.target].baseline if args.target in result.targets else None)
    base = None
    if other:
        if other not in result.targets:
            raise InputError(f"--against {other!r}: no such target in this run")
        base = imaging.image_of_result(result, other, img.polarization, sector, band,
                                       replace(img.settings, method=img.method))
    centres = imaging.scattering_centres(img, args.scatterers)
    out = outputs.prepare_out_dir(args.out)
    table = pd.DataFrame(centres, columns=imaging.SCATTERER_COLUMNS)
    for col in imaging.SCATTERER_COLUMNS[2:]:
        if col not in ("revision", "floor_limited", "rank", "method"):
            digits = 3 if col.endswith("_dbsm") or col.endswith("_deg") else (0 if col.endswith("_hz") else 5)
            table[col] = pd.to_numeric(table[col], errors="coerce").astype(float).round(digits) + 0.0
    outputs.write_csv(out / "scatterers.csv", table)
    ds = imaging.to_dataset(img, base)
    outputs.atomic_write(out / "image.nc", lambda fh: fh.write(ds.to_netcdf(None, engine="scipy")), binary=True)
    outputs.write_text(out / "image.html", image_page(img, base, centres, args.dynamic_db))
    print(f"{args.target} {img.polarization}: {img.method} image, {imaging_figures_summary(img)}; "
          f"{len(centres)} scattering centre(s) in {out}/scatterers.csv")
    return 0


def imaging_figures_summary(img) -> str:
    from ..imaging_figures import resolution_text

    return resolution_text(img)


def image_page(img, base, centres, dynamic_db: float) -> str:
    """A self-contained HTML page: the image with its centres, the difference images, the table."""
    from .. import imaging_figures as IF
    from plotly.offline import get_plotlyjs

    from ..report import PLOTLY_CONFIG

    figs = [IF.fig_image(img, dynamic_db, centres)]
    if base is not None:
        figs.append(IF.fig_image(base, dynamic_db))
        figs.extend(IF.fig_difference(img, base, dynamic_db))
    divs = "".join(f'<figure>{f.to_html(full_html=False, include_plotlyjs=False, config=PLOTLY_CONFIG)}</figure>'
                   for f in figs)
    title = f"Image of {img.target}, {img.polarization}"
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            f"<title>{IF._esc(title)}</title><script>{get_plotlyjs()}</script>"
            "<style>body{font-family:system-ui,sans-serif;max-width:1000px;margin:auto;padding:20px;color:#1d2733}"
            "table{border-collapse:collapse}td,th{border-bottom:1px solid #d8dde3;padding:4px 8px}"
            "td.num{text-align:right}.note{color:#5b6775}</style></head><body>"
            f"<h1>{IF._esc(title)}</h1><p class=\"note\">{IF._esc(IF.image_caption(img))}</p>{divs}"
            "<h2>Scattering centres (CLEAN)</h2>" + IF.centres_table_html(centres, "centres")
            + "<p class=\"note\">Floor-limited: less than the floor margin above the image floor.</p></body></html>\n")
