# Build and run flowcat in a container. The data directory is a volume.
FROM golang:1.26-bookworm AS build
WORKDIR /src
COPY go.mod go.sum ./
RUN go mod download
COPY . .
RUN CGO_ENABLED=0 go build -trimpath -o /out/flowcat ./cli/flowcat

FROM debian:bookworm-slim
COPY --from=build /out/flowcat /usr/local/bin/flowcat
RUN useradd --system --home /data flowcat && mkdir -p /data && chown flowcat /data
USER flowcat
VOLUME /data
EXPOSE 8470
ENTRYPOINT ["/usr/local/bin/flowcat"]
CMD ["serve", "--data", "/data", "--addr", "0.0.0.0:8470"]
