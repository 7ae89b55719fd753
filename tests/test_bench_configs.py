"""The experiment files the benchmarks write are valid configs (a retired setting name would stop `make bench`)."""
import importlib

import pytest
import yaml

from pipeline.config import parse_config


@pytest.mark.parametrize("module", ["benchmarks.bench_whole_job", "benchmarks.bench_full_scale"])
def test_benchmark_configs_validate(module, tmp_path):
    path = importlib.import_module(module)._write_config(tmp_path)
    spec = parse_config(yaml.safe_load(path.read_text(encoding="utf-8")), str(path))
    assert spec.families.l1.path.points == 30
