"""The benchmark scripts run (at a tiny size): a benchmark that no longer matches the library
fails here, not on the day its figures are needed. Their timings are not checked."""

from __future__ import annotations

import sys
from pathlib import Path

import pytest

BENCH = Path(__file__).resolve().parents[1] / "benchmarks"


@pytest.fixture(scope="module")
def bench():
    sys.path.insert(0, str(BENCH))
    try:
        import bench_pipeline
        import bench_regimes
        import bench_search
        import bench_spatial

        yield bench_pipeline, bench_regimes, bench_search, bench_spatial
    finally:
        sys.path.remove(str(BENCH))


def test_pipeline_benchmark_reports_every_stage(bench):
    row = bench[0].one_size(300)
    stages = ("read_check_s", "project_schedule_s", "tables_s", "indicators_s", "write_s")
    assert all(row[k] > 0 for k in stages)
    assert row["total_s"] == pytest.approx(sum(row[k] for k in stages))
    assert row["stands"] == 300 and row["harvest_rows"] > 0
    # the floor beside it: pyogrio's read plus write of the same layer, and the ratio to it
    assert row["floor_s"] > 0
    assert row["ratio"] == pytest.approx(row["total_s"] / row["floor_s"])
    # the run's CPU seconds, its own and its helper's
    assert row["cpu_s"] > 0 and row["helper_cpu_s"] >= 0


def test_regimes_benchmark_variants_differ_as_described(bench, tmp_path):
    pipeline, regimes = bench[:2]
    gpkg = tmp_path / "region.gpkg"
    pipeline.build_region(300, gpkg)
    got = {v: regimes.one_run(regimes.scenario(gpkg, 300, v), None) for v in regimes.VARIANTS}
    # thinnings only where the variant keeps them; the analysis unit's planted spruce is
    # thinned even without transitions
    assert got["plain"]["thinning_m3"] == 0 and got["transitions"]["thinning_m3"] == 0
    assert got["thinnings"]["thinning_m3"] > 0
    assert got["regimes"]["thinning_m3"] > got["thinnings"]["thinning_m3"]
    assert all(r["steps"] > 0 and r["total_s"] > r["project_schedule_s"] for r in got.values())


def test_search_benchmark_times_the_search_and_one_simulation(bench):
    row = bench[2].one_size(300, 1)
    assert row["search_s"] > row["simulation_s"] > 0 and row["trials"] >= 3
    assert row["ratio"] == pytest.approx(row["search_s"] / row["simulation_s"])


def test_spatial_benchmark_times_three_variants_side_by_side(bench):
    row = bench[3].one_size(300, 1)
    assert all(row[f"{v}_s"] > 0 for v in ("aspatial", "unit", "openings"))
    assert row["unit_ratio"] == pytest.approx(row["unit_s"] / row["aspatial_s"])
    # the rules only take cuts away: a spatial level is never above the aspatial one
    assert row["unit_level"] <= row["aspatial_level"] * (1 + 1e-6)
    assert row["openings_level"] <= row["aspatial_level"] * (1 + 1e-6)


def test_parquet_benchmark_reads_every_format_and_nets_down_both_ways():
    sys.path.insert(0, str(BENCH))
    try:
        import bench_parquet
    finally:
        sys.path.remove(str(BENCH))
    row = bench_parquet.read_bench(300, rounds=1, parts=2)
    assert all(row[f"{k}_s"] > 0 and row[f"{k}_mb"] > 0 for k in bench_parquet.FORMATS)
    assert row["speedup_file"] == pytest.approx(row["gpkg_s"] / row["parquet_s"])
    # the two netdowns agree (the benchmark asserts it) and remove area
    row = bench_parquet.netdown_bench(300, parts=2)
    assert 0 < row["harvestable_ha"] < 300 * 6.25
    assert row["memory_s"] > 0 and row["partitions_s"] > 0


def test_parallel_benchmark_builds_eight_cases_and_times_the_replicates(bench, tmp_path):
    sys.path.insert(0, str(BENCH))
    try:
        import bench_parallel
    finally:
        sys.path.remove(str(BENCH))
    gpkg = tmp_path / "region.gpkg"
    bench[0].build_region(300, gpkg)
    scn = bench_parallel.scenario(gpkg, 300, True)
    assert len(scn.sensitivity) == 8 and scn.disturbance.replicates == 0
    row = bench_parallel.one_run(gpkg, 300, "replicates", None, 4)  # serial: no cluster here
    assert row["mc_s"] > 0 and row["wall_s"] > row["mc_s"] and set(row["tables"]) == {"monte_carlo"}


def test_units_benchmark_runs_both_variants_with_three_units_and_two_partitions(bench):
    sys.path.insert(0, str(BENCH))
    try:
        import bench_units
    finally:
        sys.path.remove(str(BENCH))
    # the run mode reads management_units.csv and partitions.csv back (it stops unless they
    # name the three units and the two partitions)
    s = bench_units.run_rounds(300, 1, progress=lambda line: None)
    assert s["partitions_hold"]
    for v in bench_units.RUN_VARIANTS:
        assert s[v]["wall_s"] > s[v]["project and schedule"] > 0 and s[v]["cpu_s"] > 0
    assert s["ratio_cpu_s"] == pytest.approx(s["both"]["cpu_s"] / s["single"]["cpu_s"])
    # the 'old' partition's cap (at most 60% of each period's harvest from the stands older than
    # 100 years, about half the region's stands, which the oldest-first order cuts first)
    # holds the regional level down
    assert s["both"]["level_m3_per_year"] < s["single"]["level_m3_per_year"]
