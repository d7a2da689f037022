"""The files in ``deploy/`` parse and agree with the code: commands that exist, ports that
match, probes on routes the app serves, the one Redis configuration everywhere.

Checks against things outside our code: YAML (``yaml.safe_load_all``), argparse of the real
``spanwright`` parser, prometheus_client's ``mark_process_dead``, Flask's URL map, the
Compose specification (secrets mounted at ``/run/secrets/<name>``), the Kubernetes API
(Secret volumes: each ``items`` key becomes a file under the mount path), and
``kubectl kustomize`` (required when SPANWRIGHT_REQUIRE_SERVERS=1, as in CI).
"""

from __future__ import annotations

import os
import re
import runpy
import shlex
import shutil
import subprocess
import tomllib
from pathlib import Path
from types import SimpleNamespace
from typing import Any

import fakeredis
import pytest
import yaml
from live import require
from spanwright_topology import (
    DEPLOY,
    REPO,
    UNIT_SRC,
    UNIT_VENV_BIN,
    parse_unit,
    unit_environment,
    unit_value,
)

from service.app import create_app
from service.auth import OPEN_PATHS, KeyRing
from service.cli import build_parser
from service.metrics import init_metrics
from service.settings import Settings, SettingsError

K8S = DEPLOY / "k8s"


def load_all(path: Path) -> list[dict[str, Any]]:
    return [d for d in yaml.safe_load_all(path.read_text(encoding="utf-8")) if d is not None]


def k8s_docs() -> list[dict[str, Any]]:
    """Every Kubernetes object in deploy/k8s (the kustomization file is not one)."""
    docs = [d for p in sorted(K8S.glob("*.yaml")) for d in load_all(p)]
    return [d for d in docs if d["kind"] != "Kustomization"]


def by_kind(kind: str, name: str) -> dict[str, Any]:
    (doc,) = [d for d in k8s_docs() if d["kind"] == kind and d["metadata"]["name"] == name]
    return doc


def unit_args(unit_file: str) -> list[str]:
    """The ExecStart arguments after the program."""
    return shlex.split(unit_value(parse_unit(DEPLOY / unit_file), "ExecStart"))[1:]


def app_rules() -> set[str]:
    """Routes of the production app (create_app + init_metrics, as service/wsgi.py builds it)."""
    settings = Settings(redis_url="redis://127.0.0.1:1/0")
    conn = fakeredis.FakeRedis(server=fakeredis.FakeServer())
    app = create_app(settings, connection=conn)
    init_metrics(app, settings, conn)
    return {r.rule for r in app.url_map.iter_rules()}


def gunicorn_conf(env: dict[str, str]) -> dict[str, Any]:
    """deploy/gunicorn.conf.py executed as gunicorn does (a Python file of settings)."""
    old = dict(os.environ)
    try:
        for k in [k for k in os.environ if k.startswith("SPANWRIGHT_")]:
            del os.environ[k]
        os.environ.update(env)
        return runpy.run_path(str(DEPLOY / "gunicorn.conf.py"))
    finally:
        os.environ.clear()
        os.environ.update(old)


def test_console_script_and_subcommands_exist() -> None:
    """pyproject's console script is ``spanwright = service.cli:main``, and every command line
    the deploy files run is accepted by the real parser (subcommand and options)."""
    scripts = tomllib.loads((REPO / "pyproject.toml").read_text())["project"]["scripts"]
    assert scripts["spanwright"] == "service.cli:main"
    parser = build_parser()
    compose = load_all(DEPLOY / "compose.yaml")[0]
    worker_k8s = by_kind("Deployment", "spanwright-worker")["spec"]["template"]["spec"]
    lines = [
        ["spanwright", *unit_args("spanwright-worker@.service")],
        compose["services"]["worker"]["command"],
        worker_k8s["containers"][0]["command"],
    ]
    for argv in lines:
        assert argv[0] == "spanwright"
        args = parser.parse_args(argv[1:])
        assert args.command == "worker"
    # the three places run the same worker command line
    assert lines[1] == lines[2] == lines[0]
    help_text = parser.format_help()
    assert "worker" in help_text and "serve" in help_text


def test_units_use_the_shipped_config_and_the_layout() -> None:
    """Both units run programs from the venv in the documented layout; the API unit runs
    gunicorn with deploy/gunicorn.conf.py and wipes PROMETHEUS_MULTIPROC_DIR before start."""
    api = parse_unit(DEPLOY / "spanwright-api.service")
    worker = parse_unit(DEPLOY / "spanwright-worker@.service")
    for unit in (api, worker):
        assert unit_value(unit, "ExecStart").startswith(UNIT_VENV_BIN)
        assert unit_value(unit, "WorkingDirectory") == UNIT_SRC
        assert unit_value(unit, "WantedBy", "Install") == "multi-user.target"
    argv = shlex.split(unit_value(api, "ExecStart"))
    assert argv == [UNIT_VENV_BIN + "gunicorn", "-c", "deploy/gunicorn.conf.py"]
    assert (REPO / argv[2]).is_file()
    env = unit_environment(api)
    mdir = env["PROMETHEUS_MULTIPROC_DIR"]
    runtime = unit_value(api, "RuntimeDirectory")
    assert mdir.startswith(f"/run/{runtime}/")
    pre = unit_value(api, "ExecStartPre")
    assert (
        'rm -rf "$PROMETHEUS_MULTIPROC_DIR"' in pre
        and 'mkdir -p "$PROMETHEUS_MULTIPROC_DIR"' in pre
    )
    # a warm shutdown must be allowed to finish the longest solve
    settings = Settings()
    stop = int(unit_value(worker, "TimeoutStopSec"))
    assert stop > settings.max_time_budget + settings.job_timeout_margin


def test_gunicorn_conf_defaults_and_refusals(tmp_path: Path) -> None:
    """Defaults: loopback 8080, the wsgi module, gthread, timeout above the longest wait.
    A non-loopback bind needs a keys file (keyless, the app answers 401 to every caller not
    on loopback): refused without SPANWRIGHT_KEYS_FILE, with a message naming it, whatever
    the retired SPANWRIGHT_ALLOW_NON_LOOPBACK says; child_exit marks a dead process's
    live gauges as prometheus_client's multiprocess mode requires."""
    conf = gunicorn_conf({})
    assert conf["bind"] == ["127.0.0.1:8080"]
    assert conf["wsgi_app"] == "service.wsgi:app"
    module, _, attr = conf["wsgi_app"].partition(":")
    import importlib

    assert hasattr(importlib.import_module(module), "__getattr__") and attr == "app"
    assert conf["worker_class"] == "gthread" and conf["preload_app"] is True
    assert conf["timeout"] > Settings().max_wait
    assert gunicorn_conf({"SPANWRIGHT_BIND": "127.0.0.1:9000"})["bind"] == ["127.0.0.1:9000"]
    for env in (
        {"SPANWRIGHT_BIND": "0.0.0.0:8080"},
        {"SPANWRIGHT_BIND": "10.1.2.3:8080", "SPANWRIGHT_ALLOW_NON_LOOPBACK": "1"},
    ):
        with pytest.raises(SystemExit, match=r"refusing to bind .*SPANWRIGHT_KEYS_FILE"):
            gunicorn_conf(env)
    allowed = gunicorn_conf(
        {"SPANWRIGHT_BIND": "0.0.0.0:8080", "SPANWRIGHT_KEYS_FILE": "/etc/spanwright/keys"}
    )
    assert allowed["bind"] == ["0.0.0.0:8080"]
    with pytest.raises(SystemExit, match="SPANWRIGHT_MAX_WAIT"):
        gunicorn_conf({"SPANWRIGHT_MAX_WAIT": "soon"})
    live = tmp_path / "gauge_livesum_4242.db"
    live.write_bytes(b"")
    keep = tmp_path / "counter_4242.db"
    keep.write_bytes(b"")
    conf = gunicorn_conf({"PROMETHEUS_MULTIPROC_DIR": str(tmp_path)})
    os.environ["PROMETHEUS_MULTIPROC_DIR"] = str(tmp_path)
    try:
        conf["child_exit"](None, SimpleNamespace(pid=4242))
    finally:
        del os.environ["PROMETHEUS_MULTIPROC_DIR"]
    assert not live.exists() and keep.exists()


def test_containerfile_copies_what_exists_and_runs_the_shipped_config() -> None:
    """Debian slim Python base; every COPY source exists; the default command wipes the
    metrics directory and execs gunicorn with deploy/gunicorn.conf.py; EXPOSE matches the
    bind port."""
    text = (DEPLOY / "Containerfile").read_text()
    instructions = [ln for ln in text.splitlines() if ln and not ln.startswith("#")]
    joined = "\n".join(instructions).replace("\\\n", " ")
    (base,) = re.findall(r"^FROM\s+(\S+)", joined, re.M)
    assert re.fullmatch(r"python:3\.1[1-9]-slim(-bookworm|-trixie)?", base)
    for src in re.findall(r"^COPY\s+(.+?)\s+\S+$", joined, re.M):
        for part in src.split():
            assert (REPO / part).exists(), part
    (expose,) = re.findall(r"^EXPOSE\s+(\d+)", joined, re.M)
    bind = re.search(r"SPANWRIGHT_BIND=(\S+)", joined)
    assert bind is not None and bind.group(1).rsplit(":", 1)[1] == expose
    (cmd,) = re.findall(r"^CMD\s+(.+)$", joined, re.M)
    cmd_text = " ".join(yaml.safe_load(cmd))  # JSON array form (YAML reads JSON)
    assert "exec gunicorn -c deploy/gunicorn.conf.py" in cmd_text
    assert 'rm -rf "$PROMETHEUS_MULTIPROC_DIR"' in cmd_text
    assert "pip install" in joined and "gunicorn" in joined and "prometheus-client" in joined


def test_compose_topology() -> None:
    """compose.yaml: Redis runs deploy/redis.conf (mounted unchanged), the API publishes its
    bind port on the host's loopback only, workers are scaled, the healthcheck hits /healthz."""
    doc = load_all(DEPLOY / "compose.yaml")[0]
    svc = doc["services"]
    assert set(svc) == {"redis", "api", "worker"}
    redis_cmd = svc["redis"]["command"]
    mount = next(v for v in svc["redis"]["volumes"] if v.endswith("redis.conf:ro"))
    host_path, container_path, _ = mount.split(":")
    assert (DEPLOY / host_path).resolve() == DEPLOY / "redis.conf"
    assert redis_cmd[:2] == ["redis-server", container_path]
    for name in ("api", "worker"):
        build = svc[name]["build"]
        assert (DEPLOY / build["context"] / build["dockerfile"]).resolve().is_file()
        assert svc[name]["environment"]["REDIS_URL"] == "redis://redis:6379/0"
    port = svc["api"]["environment"]["SPANWRIGHT_BIND"].rsplit(":", 1)[1]
    (published,) = svc["api"]["ports"]
    host, _host_port, cport = published.split(":")
    assert host == "127.0.0.1" and cport == port
    assert "/healthz" in " ".join(svc["api"]["healthcheck"]["test"])
    assert svc["worker"]["deploy"]["replicas"] >= 2
    assert "/healthz" in app_rules()


def test_kubernetes_manifests() -> None:
    """API Deployment + Service with probes on /healthz and /readyz (routes the app serves),
    ports consistent from bind to Service; worker Deployment with an HPA on a metric the API
    exposes; Redis StatefulSet with a PVC and deploy/redis.conf verbatim in its ConfigMap."""
    docs = k8s_docs()
    kinds = {(d["kind"], d["metadata"]["name"]) for d in docs}
    assert {
        ("Deployment", "spanwright-api"),
        ("Service", "spanwright-api"),
        ("Deployment", "spanwright-worker"),
        ("HorizontalPodAutoscaler", "spanwright-worker"),
        ("StatefulSet", "spanwright-redis"),
        ("Service", "spanwright-redis"),
        ("ConfigMap", "spanwright-redis-conf"),
    } <= kinds
    rules = app_rules()
    api = by_kind("Deployment", "spanwright-api")
    (c,) = api["spec"]["template"]["spec"]["containers"]
    env = {e["name"]: e["value"] for e in c["env"]}
    (port,) = c["ports"]
    assert env["SPANWRIGHT_BIND"].rsplit(":", 1)[1] == str(port["containerPort"])
    assert c["livenessProbe"]["httpGet"]["path"] == "/healthz"
    assert c["readinessProbe"]["httpGet"]["path"] == "/readyz"
    for probe in ("livenessProbe", "readinessProbe"):
        assert c[probe]["httpGet"]["path"] in rules
        assert c[probe]["httpGet"]["port"] == port["name"]
    assert api["spec"]["template"]["metadata"]["annotations"]["prometheus.io/path"] in rules
    svc = by_kind("Service", "spanwright-api")
    assert svc["spec"]["type"] == "ClusterIP"
    assert svc["spec"]["ports"][0]["targetPort"] == port["name"]
    assert svc["spec"]["selector"] == api["spec"]["selector"]["matchLabels"]
    hpa = by_kind("HorizontalPodAutoscaler", "spanwright-worker")
    assert hpa["spec"]["scaleTargetRef"]["name"] == "spanwright-worker"
    assert hpa["spec"]["minReplicas"] >= 1
    metric = hpa["spec"]["metrics"][0]["external"]["metric"]
    assert metric["name"] == "spanwright_queue_jobs"
    conf = by_kind("ConfigMap", "spanwright-redis-conf")["data"]["redis.conf"]
    assert conf.strip().splitlines() == (DEPLOY / "redis.conf").read_text().strip().splitlines()
    sts = by_kind("StatefulSet", "spanwright-redis")
    assert sts["spec"]["volumeClaimTemplates"][0]["metadata"]["name"] == "data"
    (rc,) = sts["spec"]["template"]["spec"]["containers"]
    assert rc["command"][:2] == ["redis-server", "/usr/local/etc/redis/redis.conf"]
    assert "--dir" in rc["command"] and rc["command"][rc["command"].index("--dir") + 1] == "/data"
    urls = {
        e["value"]
        for d in docs
        if d["kind"] == "Deployment"
        for ct in d["spec"]["template"]["spec"]["containers"]
        for e in ct.get("env", [])
        if e["name"] == "REDIS_URL"
    }
    rsvc = by_kind("Service", "spanwright-redis")
    assert urls == {f"redis://{rsvc['metadata']['name']}:{rsvc['spec']['ports'][0]['port']}/0"}


def test_kustomize_builds_the_manifests() -> None:
    """``kubectl kustomize deploy/k8s`` renders every manifest (skipped without kubectl,
    a failure with SPANWRIGHT_REQUIRE_SERVERS=1: CI installs Debian's kubernetes-client)."""
    require("kubectl")
    kubectl = shutil.which("kubectl")
    assert kubectl is not None
    out = subprocess.run(
        [kubectl, "kustomize", str(K8S)], capture_output=True, text=True, timeout=60, check=True
    ).stdout
    rendered = {(d["kind"], d["metadata"]["name"]) for d in yaml.safe_load_all(out) if d}
    assert rendered == {(d["kind"], d["metadata"]["name"]) for d in k8s_docs()}


def test_deploy_files_mount_a_keys_file() -> None:
    """Every deploy that binds a non-loopback address gives the API a keys file, as
    gunicorn.conf.py demands: compose mounts a secret (Compose spec: at
    ``/run/secrets/<name>``) from a host file outside the build context and points
    SPANWRIGHT_KEYS_FILE at it; Kubernetes mounts the Secret ``spanwright-keys`` (listed
    in the kustomization) where SPANWRIGHT_KEYS_FILE points. The shipped Secret is an
    example: it holds no SHA-256 digest, and its line is refused by the keys-file parser,
    so the API cannot start on it. The retired SPANWRIGHT_ALLOW_NON_LOOPBACK is gone, and
    the Containerfile says how to make a keys line."""
    compose = load_all(DEPLOY / "compose.yaml")[0]
    api = compose["services"]["api"]
    (secret,) = api["secrets"]
    assert api["environment"]["SPANWRIGHT_KEYS_FILE"] == f"/run/secrets/{secret}"
    host_file = Path(compose["secrets"][secret]["file"])
    assert host_file.is_absolute() and REPO not in host_file.parents
    api_k8s = by_kind("Deployment", "spanwright-api")["spec"]["template"]["spec"]
    (c,) = api_k8s["containers"]
    keys_path = {e["name"]: e["value"] for e in c["env"]}["SPANWRIGHT_KEYS_FILE"]
    mounts = {m["name"]: m for m in c["volumeMounts"]}
    volumes = {v["name"]: v for v in api_k8s["volumes"] if "secret" in v}
    found = [
        (name, v["secret"]["secretName"], item["key"])
        for name, v in volumes.items()
        for item in v["secret"]["items"]
        if name in mounts and f"{mounts[name]['mountPath']}/{item['path']}" == keys_path
    ]
    assert len(found) == 1, (keys_path, volumes)
    volume, secret_name, item_key = found[0]
    assert mounts[volume]["readOnly"] is True
    example = by_kind("Secret", secret_name)["stringData"][item_key]
    assert re.search(r"\b[0-9a-fA-F]{64}\b", example) is None
    with pytest.raises(SettingsError):
        KeyRing.parse(example)
    kustomization = yaml.safe_load((K8S / "kustomization.yaml").read_text())
    assert any(
        by_kind("Secret", secret_name) in load_all(K8S / r) for r in kustomization["resources"]
    )
    leaks = [
        p
        for p in [*DEPLOY.rglob("*"), REPO / "README.md"]
        if p.is_file()
        and "__pycache__" not in p.parts
        and p.name != "gunicorn.conf.py"
        and "ALLOW_NON_LOOPBACK" in p.read_text()
    ]
    assert leaks == []
    containerfile = (DEPLOY / "Containerfile").read_text()
    assert 'printf %s "$KEY" | sha256sum' in containerfile
    assert "SPANWRIGHT_KEYS_FILE" in containerfile


def test_metrics_scrape_matches_the_open_paths() -> None:
    """The decision on ``/metrics``: an open path (like the probes), so the Prometheus
    scrape annotations of the API pods, which carry no credentials, reach it."""
    api = by_kind("Deployment", "spanwright-api")
    annotations = api["spec"]["template"]["metadata"]["annotations"]
    assert annotations["prometheus.io/scrape"] == "true"
    assert annotations["prometheus.io/path"] in OPEN_PATHS
    assert "/metrics" in OPEN_PATHS


def test_readme_names_every_file() -> None:
    """deploy/README.md mentions every file shipped in deploy/."""
    readme = (DEPLOY / "README.md").read_text()
    unnamed = [
        p.name
        for p in sorted(DEPLOY.rglob("*"))
        if p.is_file()
        and p.name != "README.md"
        and "__pycache__" not in p.parts
        and p.name not in readme
    ]
    assert unnamed == []
