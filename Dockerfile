# midsag service image: multi-stage, runs as a non-root user, no GPU.
# Build: docker build -t midsag .
# Run:   docker run -p 8080:8080 -p 9090:9090 -p 11112:11112 -v midsag-data:/data midsag

# 1. ONNX Runtime 1.24.1 CPU library from the onnxruntime-node npm package,
#    sha256-checked by the same script `make ort` uses.
FROM node:20-bookworm-slim AS ort
WORKDIR /src
COPY scripts/get-onnxruntime.sh scripts/get-onnxruntime.sh
RUN bash scripts/get-onnxruntime.sh && \
    cp third_party/onnxruntime/linux-*/libonnxruntime.so.1 /libonnxruntime.so.1

# 2. The midsag binary (cgo for ONNX Runtime).
FROM golang:1.26-bookworm AS build
WORKDIR /src
COPY go.mod go.sum ./
RUN go mod download
COPY . .
RUN CGO_ENABLED=1 go build -trimpath -o /midsag ./cmd/midsag

# 3. Runtime: the binary with the library beside it, where midsag looks.
FROM debian:bookworm-slim
RUN apt-get update && apt-get install -y --no-install-recommends ca-certificates curl && \
    rm -rf /var/lib/apt/lists/* && \
    useradd --system --uid 10001 --home-dir /data --create-home midsag
COPY --from=build /midsag /opt/midsag/midsag
COPY --from=ort /libonnxruntime.so.1 /opt/midsag/libonnxruntime.so.1
USER midsag
WORKDIR /data
ENV MIDSAG_DATA_DIR=/data
EXPOSE 8080 9090 11112
HEALTHCHECK --interval=30s --timeout=5s --start-period=20s --retries=3 \
    CMD curl -fsS http://127.0.0.1:8080/healthz || exit 1
ENTRYPOINT ["/opt/midsag/midsag"]
CMD ["serve"]
