# Image for the web server and render workers (docker-compose.yml).
FROM python:3.11-slim-bookworm
RUN apt-get update && apt-get install -y --no-install-recommends libllvm19 && rm -rf /var/lib/apt/lists/*
WORKDIR /app
COPY requirements.txt .
RUN pip install --no-cache-dir -r requirements.txt
COPY . .
ENV DRJIT_LIBLLVM_PATH=/usr/lib/x86_64-linux-gnu/libLLVM-19.so
EXPOSE 8000
