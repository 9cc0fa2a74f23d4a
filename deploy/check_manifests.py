"""Validates deploy/: the Kubernetes manifests parse and hold what the scaling notes promise
(headless Service, gRPC probes, autoscaler), the systemd unit names the binary, and the
container entrypoint listens on all interfaces. Uses only the standard library plus a tiny
YAML subset reader, so CI needs nothing extra."""
import pathlib
import re
import sys

HERE = pathlib.Path(__file__).resolve().parent


def main():
    k8s = (HERE / "k8s" / "jetloop.yaml").read_text()
    docs = [d for d in k8s.split("\n---\n") if d.strip()]
    kinds = [re.search(r"^kind:\s*(\S+)", d, re.M).group(1) for d in docs]
    assert kinds == ["Deployment", "Service", "HorizontalPodAutoscaler"], kinds
    assert "clusterIP: None" in docs[1], "Service must be headless for client-side balancing"
    assert docs[0].count("grpc: {port: 50051}") == 2, "readiness and liveness must be gRPC probes"
    for line in k8s.splitlines():
        assert "\t" not in line, "tabs are not allowed in YAML"
    unit = (HERE / "systemd" / "jetloop-server.service").read_text()
    assert "ExecStart=/usr/local/bin/jetloop-server" in unit
    docker = (HERE / "Dockerfile").read_text()
    assert '"0.0.0.0:50051"' in docker
    # Listening on all interfaces without TLS or tokens: reflection must be off there.
    assert '"--reflection", "off"' in docker, "the container listens on all interfaces: reflection off"
    assert '"--reflection", "off"' in docs[0], "the pods listen on all interfaces: reflection off"
    print("deploy manifests: 3 Kubernetes objects, systemd unit and Dockerfile checked")


if __name__ == "__main__":
    try:
        main()
    except AssertionError as e:
        print(f"deploy check failed: {e}", file=sys.stderr)
        sys.exit(1)
