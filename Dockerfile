# flowcat in a container. The data directory is the volume /data; an empty
# volume is initialized on first start (deploy/entrypoint.sh). Build:
#   docker build -t flowcat:local --build-arg VERSION=$(git describe --always) .
FROM golang:1.26-bookworm AS build
WORKDIR /src
COPY go.mod go.sum ./
RUN go mod download
COPY . .
# VERSION names the build in `flowcat --version` and /metrics when the
# module version the Go toolchain records is "(devel)" (.git is not sent).
ARG VERSION=""
RUN CGO_ENABLED=0 go build -trimpath \
      -ldflags "-X github.com/flowcat-catalog/flowcat/server.buildVersion=${VERSION}" \
      -o /out/flowcat ./cli/flowcat

FROM debian:bookworm-slim
COPY --from=build /out/flowcat /usr/local/bin/flowcat
COPY deploy/entrypoint.sh /usr/local/bin/flowcat-entrypoint
RUN useradd --system --home /data flowcat && mkdir -p /data && chown flowcat /data && chmod 0700 /data
USER flowcat
ENV FLOWCAT_DATA=/data FLOWCAT_ADDR=0.0.0.0:8470
VOLUME /data
EXPOSE 8470
# /readyz: the catalog and the blob store answer.
HEALTHCHECK --interval=30s --timeout=10s --start-period=30s --retries=3 \
  CMD ["flowcat", "ready", "--quiet", "--url", "http://127.0.0.1:8470/readyz"]
ENTRYPOINT ["/usr/local/bin/flowcat-entrypoint"]
CMD []
