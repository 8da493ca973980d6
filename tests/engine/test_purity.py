"""The engine stays pure: importing it loads no web, database, queue or validation library."""

import subprocess
import sys

import service.engine as engine


def test_engine_imports_no_service_libraries():
    code = (
        "import sys, service.engine, service.engine.simulate, service.engine.search;"
        "import service.engine.designs as d; [d.get(x.outcome, x.layout) for x in d.all()];"
        "bad = [m for m in ('flask', 'sqlalchemy', 'celery', 'marshmallow', 'kombu', 'redis', 'jinja2')"
        " if m in sys.modules]; print(','.join(bad))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "", f"the engine pulled in {out.stdout.strip()}"


def test_public_surface_is_explicit():
    public = {name for name in dir(engine) if not name.startswith("_")}
    modules = {
        "compute",
        "designs",
        "errors",
        "records",
        "adjust",
        "simulate",
        "plan",
        "chunks",
        "kernels",
        "runner",
        "approximate",
        "starting",
        "examples",
        "search",
        "models",
        "vectests",
        "quantiles",
        "explore",
        "direction",
        "cluster",
        "cluster_sim",
        "implied",
        "ledger",
        "sequential",
        "group_sequential",
        "manytoone",
        "repeated",
        "assurance",
        "precision",
        "diagnostic_precision",
    }
    assert public - modules - set(engine.__all__) == set()
    for name in engine.__all__:
        assert hasattr(engine, name)
