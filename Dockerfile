# One image for the API and the worker.
FROM python:3.11-slim
# nginx-light: the API's front (`stifflane api --front`, cli/front.py)
RUN apt-get update && apt-get install -y --no-install-recommends build-essential nginx-light \
    && rm -rf /var/lib/apt/lists/*
WORKDIR /app
COPY pyproject.toml README.md ./
COPY engine engine
COPY calibration calibration
COPY sweeps sweeps
COPY schemas schemas
COPY service service
COPY worker worker
COPY jobs jobs
COPY cli cli
COPY examples examples
RUN pip install --no-cache-dir -e .  # editable: examples/ and static files stay under /app
ENV STIFFLANE_NUMBA_CACHE=/var/cache/stifflane-numba PYTHONUNBUFFERED=1
RUN useradd --create-home stifflane && mkdir -p $STIFFLANE_NUMBA_CACHE /app/var \
    && chown stifflane $STIFFLANE_NUMBA_CACHE /app/var
USER stifflane
EXPOSE 8750
CMD ["stifflane", "api", "--host", "0.0.0.0", "--front"]
