"""deploy/check_manifests.py passes on deploy/ and fails on broken copies: a field the
Kubernetes schema does not know, a grace period shorter than the drain, and a unit without its
sandboxing."""
import pathlib
import shutil
import subprocess
import sys

DEPLOY = pathlib.Path(__file__).resolve().parents[2] / "deploy"


def run(folder):
    return subprocess.run([sys.executable, str(DEPLOY / "check_manifests.py"), str(folder)],
                          capture_output=True, text=True, timeout=120)


def broken(tmp_path, rel, old, new):
    copy = tmp_path / "deploy"
    shutil.copytree(DEPLOY, copy)
    f = copy / rel
    text = f.read_text()
    assert old in text
    f.write_text(text.replace(old, new, 1))
    return copy


def test_the_manifests_pass():
    r = run(DEPLOY)
    assert r.returncode == 0, r.stderr


def test_an_unknown_field_fails_the_schema_check(tmp_path):
    r = run(broken(tmp_path, "k8s/jetloop.yaml", "  replicas: 2", "  replicaz: 2"))
    assert r.returncode == 1 and "Kubernetes schemas" in r.stderr, r.stderr


def test_a_grace_period_shorter_than_the_drain_fails(tmp_path):
    r = run(broken(tmp_path, "k8s/jetloop.yaml", "terminationGracePeriodSeconds: 40", "terminationGracePeriodSeconds: 10"))
    assert r.returncode == 1 and "must exceed the drain" in r.stderr, r.stderr


def test_a_unit_without_sandboxing_fails(tmp_path):
    r = run(broken(tmp_path, "systemd/jetloop-server.service", "ProtectSystem=strict\n", ""))
    assert r.returncode == 1 and "ProtectSystem=strict" in r.stderr, r.stderr
