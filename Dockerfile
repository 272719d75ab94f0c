# dualcost service image: slim Python, non-root user, health check on /health.
# Household jobs and saved runs are kept in SQLite under DUALCOST_DATA_DIR (mount a volume there
# to keep them), or in PostgreSQL with DUALCOST_DATABASE_URL for several containers.
FROM python:3.11-slim

ENV PYTHONDONTWRITEBYTECODE=1 \
    PYTHONUNBUFFERED=1 \
    PIP_NO_CACHE_DIR=1 \
    DUALCOST_HOST=0.0.0.0 \
    DUALCOST_PORT=8000 \
    DUALCOST_WORKERS=2 \
    DUALCOST_DATA_DIR=/data

WORKDIR /app
COPY pyproject.toml README.md ./
COPY service ./service
RUN pip install . && useradd --create-home --uid 10001 dualcost \
    && mkdir /data && chown dualcost /data
VOLUME /data

USER dualcost
EXPOSE 8000
HEALTHCHECK --interval=30s --timeout=3s --start-period=10s --retries=3 \
  CMD python -c "import urllib.request,sys; sys.exit(0 if urllib.request.urlopen('http://127.0.0.1:8000/health', timeout=2).status == 200 else 1)"
CMD ["sh", "-c", "dualcost serve --host \"$DUALCOST_HOST\" --port \"$DUALCOST_PORT\" --workers \"$DUALCOST_WORKERS\""]
