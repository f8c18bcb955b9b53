"""What management regimes cost: the same run with and without transitions and thinnings.

Builds the synthetic region of ``bench_pipeline.py`` (square 6.25 ha stands, the sample's
species and rules, aspatial, no LP bound) and runs ``yieldscape.run`` on it twice per round,
in one process and alternating, so that both variants see the same machine state:

- *regimes*: the sample scenario as it is (young spruce as an analysis unit, clearcut spruce
  and pine regrowing as planted codes, planted spruce thinned twice, fir's choice taken as
  its first option by the rules);
- *plain*: the same scenario with ``regenerate_as``, the thinnings and the analysis units
  removed (every stand regrows on its own code; clearcut is the only treatment).

The levels differ (the regimes grow more wood), so the search may take a different number of
trial horizons; the table gives the projection and scheduling time per trial horizon beside
the totals. Target (regimes issue): the regimes variant at most 1.3x the plain one.

    python benchmarks/bench_regimes.py                      # 100k stands, 3 rounds
    python benchmarks/bench_regimes.py --stands 20000 --rounds 5 --markdown
    python benchmarks/bench_regimes.py --variants plain regimes
"""

from __future__ import annotations

import argparse
import json
import statistics
import sys
import tempfile
import tomllib
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from bench_pipeline import SCENARIO, build_region  # noqa: E402

VARIANTS = ("plain", "transitions", "thinnings", "regimes")


def scenario(gpkg: Path, n: int, variant: str | bool):
    """The synthetic scenario as ``variant``: "regimes" (True) the sample's as they are,
    "plain" (False) without analysis units, transitions or thinnings, "transitions" without
    the thinnings, "thinnings" without the transitions (the analysis unit's planted spruce is
    still thinned)."""
    if isinstance(variant, bool):
        variant = "regimes" if variant else "plain"
    from yieldscape.config import parse_scenario

    raw = tomllib.loads(SCENARIO.read_text())
    raw["inventory"]["path"] = str(gpkg)
    raw["inventory"].pop("from_raster", None)
    for section in ("landbase", "cover", "sensitivity", "units", "partitions"):
        raw.pop(section, None)
    raw["inventory"]["fields"].pop("unit", None)  # one regional flow
    raw["harvest"] = {"priority": "oldest", "max_area_ha_per_period": n * 6.25 * 0.18}
    raw["flow"]["lp_bound"] = False
    raw["report"] = {"age_class_width_years": 20}
    if variant == "plain":
        raw["inventory"].pop("analysis_units", None)
    for table in raw["species"].values():
        if variant in ("plain", "thinnings"):
            table.pop("regenerate_as", None)
        if variant in ("plain", "transitions"):
            table.pop("thinnings", None)
            table.pop("thinning_m3_ha", None)
    return parse_scenario(raw, base_dir=SCENARIO.parent, where=str(SCENARIO))


def one_run(scn, out: Path | None) -> dict:
    """One run's timings (with the writing, as run.json records them; out=None: no writing)."""
    import yieldscape

    result = yieldscape.run(scn, out)
    st = json.loads((out / "run.json").read_text())["timings_s"] if out else result.timings_s
    wf = result.wood_flow
    return {
        "project_schedule_s": st["project and schedule"],
        "total_s": sum(st.values()),
        "steps": result.flow.steps,
        "level_m3_per_year": float(wf["harvest_m3_per_year"].iloc[0]),
        "thinning_m3": float(wf["thinning_m3"].sum()),
    }


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--stands", type=int, default=100_000)
    ap.add_argument("--rounds", type=int, default=3)
    ap.add_argument("--markdown", action="store_true")
    ap.add_argument("--variants", nargs="+", choices=VARIANTS, default=list(VARIANTS))
    args = ap.parse_args()
    ap_variants = args.variants
    runs: dict[str, list[dict]] = {v: [] for v in ap_variants}
    with tempfile.TemporaryDirectory(dir=HERE) as tmp:
        tmp = Path(tmp)
        gpkg = tmp / "region.gpkg"
        build_region(args.stands, gpkg)
        scns = {v: scenario(gpkg, args.stands, v) for v in runs}
        for r in range(args.rounds):
            for variant in ap_variants if r % 2 == 0 else ap_variants[::-1]:
                row = one_run(scns[variant], tmp / f"out-{variant}-{r}")
                runs[variant].append(row)
                print(
                    f"round {r + 1} {variant:>11}: project+schedule "
                    f"{row['project_schedule_s']:.2f} s ({row['steps']} trial horizons), "
                    f"total {row['total_s']:.2f} s, level {row['level_m3_per_year']:,.0f} "
                    f"m3/year, thinnings {row['thinning_m3']:,.0f} m3",
                    flush=True,
                )

    def med(variant: str, key: str) -> float:
        return statistics.median(row[key] for row in runs[variant])

    def per_step(variant: str) -> float:
        return statistics.median(row["project_schedule_s"] / row["steps"] for row in runs[variant])

    def ratio(v: str, key: str) -> float:
        return med(v, key) / med("plain", key)

    for v in runs:
        if v != "plain" and "plain" in runs:
            print(
                f"{v} / plain (medians of {args.rounds} rounds): project+schedule "
                f"{ratio(v, 'project_schedule_s'):.2f}x, per trial horizon "
                f"{per_step(v) / per_step('plain'):.2f}x, whole run {ratio(v, 'total_s'):.2f}x"
            )
    if args.markdown and "plain" in runs:
        print(
            "\n| variant | level m3/year | thinnings m3 | trial horizons | project + schedule s | "
            "x plain | whole run s | x plain |"
        )
        print("|---|---:|---:|---:|---:|---:|---:|---:|")
        for v in runs:
            print(
                f"| {v} | {med(v, 'level_m3_per_year'):,.0f} | {med(v, 'thinning_m3'):,.0f} | "
                f"{med(v, 'steps'):.0f} | {med(v, 'project_schedule_s'):.2f} | "
                f"{ratio(v, 'project_schedule_s'):.2f} | {med(v, 'total_s'):.2f} | "
                f"{ratio(v, 'total_s'):.2f} |"
            )


if __name__ == "__main__":
    main()
