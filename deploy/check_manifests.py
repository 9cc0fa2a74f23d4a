"""Validates deploy/ (or the folder given): every Kubernetes manifest against the official
schemas (kubernetes-validate, strict: unknown fields fail) and yamllint; then what the
deployment notes promise: a headless Service, gRPC probes, an autoscaler and a disruption
budget, a drain matched to the grace period, reflection off where the server listens on all
interfaces, a hardened systemd unit and a two-stage non-root container with a gRPC health check.

    python3 deploy/check_manifests.py [FOLDER]     # exit 1 with the reasons on failure

Needs `pip install kubernetes-validate yamllint` (PyPI; .ci/run installs them).
"""
import pathlib
import re
import subprocess
import sys

import yaml

YAMLLINT_CONFIG = "{extends: default, rules: {line-length: {max: 120}, document-start: disable, comments: {min-spaces-from-content: 1}}}"


def arg(args, name):
    """The value after `name` in a container's args list, as a number."""
    return float(args[args.index(name) + 1])


def check(folder: pathlib.Path):
    problems = []
    manifests = sorted((folder / "k8s").glob("*.yaml"))
    if not manifests:
        return [f"no Kubernetes manifests under {folder / 'k8s'}"]
    for m in manifests:
        r = subprocess.run([sys.executable, "-m", "kubernetes_validate", "--strict", "--quiet", str(m)],
                           capture_output=True, text=True)
        if r.returncode != 0:
            problems.append(f"{m.name}: not valid against the Kubernetes schemas:\n{r.stdout}{r.stderr}")
        r = subprocess.run([sys.executable, "-m", "yamllint", "-d", YAMLLINT_CONFIG, str(m)], capture_output=True, text=True)
        if r.returncode != 0:
            problems.append(f"{m.name}: yamllint:\n{r.stdout}{r.stderr}")
    try:
        docs = [d for d in yaml.safe_load_all((folder / "k8s" / "jetloop.yaml").read_text()) if d]
    except (OSError, yaml.YAMLError) as e:
        return problems + [f"jetloop.yaml: {e}"]
    kinds = {d.get("kind"): d for d in docs}
    for k in ("Deployment", "Service", "HorizontalPodAutoscaler", "PodDisruptionBudget"):
        if k not in kinds:
            problems.append(f"jetloop.yaml has no {k}")
    if problems:
        return problems
    if kinds["Service"]["spec"].get("clusterIP") != "None":
        problems.append("the Service must be headless (clusterIP: None) for client-side balancing")
    pod = kinds["Deployment"]["spec"]["template"]["spec"]
    c = pod["containers"][0]
    for probe in ("readinessProbe", "livenessProbe"):
        if "grpc" not in c.get(probe, {}):
            problems.append(f"{probe} must be a native gRPC probe")
    args = c.get("args", [])
    if "--reflection" not in args or args[args.index("--reflection") + 1] != "off":
        problems.append("the pods listen on all interfaces without TLS or tokens: reflection off")
    if "--token-file" not in args and "--allow-insecure-network" not in args:
        problems.append("the pods listen on all interfaces: give --token-file or (knowingly) --allow-insecure-network")
    try:
        drain = arg(args, "--drain-notice-s") + arg(args, "--drain-s")
        grace = pod.get("terminationGracePeriodSeconds", 30)
        if grace <= drain:
            problems.append(f"terminationGracePeriodSeconds {grace} must exceed the drain ({drain} s)")
    except (ValueError, IndexError):
        problems.append("the server args must set --drain-notice-s and --drain-s (matched to the grace period)")
    if not all(k in c.get("resources", {}) for k in ("requests", "limits")):
        problems.append("the container needs resource requests and limits")
    unit = (folder / "systemd" / "jetloop-server.service").read_text()
    for needle in ("ExecStart=/usr/local/bin/jetloop-server --listen 127.0.0.1:", "DynamicUser=yes",
                   "NoNewPrivileges=yes", "ProtectSystem=strict", "CapabilityBoundingSet=", "SystemCallFilter="):
        if needle not in unit:
            problems.append(f"systemd unit: missing {needle}")
    m = re.search(r"TimeoutStopSec=(\d+)", unit)
    notice = re.search(r"--drain-notice-s (\S+)", unit)
    d = re.search(r"--drain-s (\S+)", unit)
    if not (m and notice and d) or float(m.group(1)) <= float(notice.group(1)) + float(d.group(1)):
        problems.append("systemd unit: TimeoutStopSec must exceed --drain-notice-s + --drain-s")
    docker = (folder / "Dockerfile").read_text()
    if len(re.findall(r"^FROM ", docker, re.M)) < 2:
        problems.append("Dockerfile: build and runtime stages expected")
    if not re.search(r"^USER (?!0\b|root\b)\S+", docker, re.M):
        problems.append("Dockerfile: the runtime must run as a non-root user")
    if not re.search(r"^HEALTHCHECK .*\n?.*health", docker, re.M):
        problems.append("Dockerfile: a HEALTHCHECK asking the gRPC health service is expected")
    if '"0.0.0.0:50051"' not in docker or '"--reflection", "off"' not in docker:
        problems.append("Dockerfile: listens on all interfaces, so reflection off")
    if '"--token-file"' not in docker and '"--allow-insecure-network"' not in docker:
        problems.append("Dockerfile: listens on all interfaces: --token-file or (knowingly) --allow-insecure-network")
    return problems


def main():
    folder = pathlib.Path(sys.argv[1]) if len(sys.argv) > 1 else pathlib.Path(__file__).resolve().parent
    problems = check(folder)
    if problems:
        print("deploy check failed:\n- " + "\n- ".join(problems), file=sys.stderr)
        sys.exit(1)
    n = len(sorted((folder / "k8s").glob("*.yaml")))
    print(f"deploy manifests: {n} Kubernetes files valid (schemas, yamllint), drain matched, systemd unit and Dockerfile checked")


if __name__ == "__main__":
    main()
