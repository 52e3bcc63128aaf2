# leakfleet (gateway, dashboard, simulator) in one image; deploy/compose/compose.yaml builds it.
# Not built in CI (no container registry there); the same install is what `make` does.
FROM python:3.11-slim
RUN useradd --system --home-dir /var/lib/leakfleet --create-home leakfleet
WORKDIR /opt/leakfleet
COPY pyproject.toml README.md ./
COPY gateway ./gateway
COPY sim ./sim
COPY analytics ./analytics
COPY dashboard ./dashboard
RUN pip install --no-cache-dir .
USER leakfleet
WORKDIR /var/lib/leakfleet
ENTRYPOINT []
CMD ["leakfleet", "--help"]
