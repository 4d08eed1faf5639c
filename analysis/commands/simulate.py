"""`cloakrcs simulate CONFIG.toml --out DIR`: write a synthetic campaign and print planning figures."""

from __future__ import annotations

from pathlib import Path

from ..simulate import load_simulation_config, simulate_campaign


def register(sub) -> None:
    p = sub.add_parser("simulate", help="write a synthetic chamber campaign (Touchstone files, manifest, truth) "
                                        "and print planning figures")
    p.add_argument("config", help="simulator config (TOML; keys in sample_measurements/README.md)")
    p.add_argument("--out", required=True, help="folder to write the campaign into (created if missing)")
    p.set_defaults(func=run)


def run(args) -> int:
    cfg = load_simulation_config(args.config)
    result = simulate_campaign(cfg, Path(args.out))
    size = sum(p.stat().st_size for p in result.files)
    print(result.planning_text)
    print(f"wrote {len(result.files)} sweep files ({size / 1e6:.2f} MB), {result.manifest_path}"
          + (f" and {len(result.truth_files)} truth files in {result.manifest_path.parent / 'truth'}"
             if result.truth_files else ""))
    return 0
