# The curvewatch binary in a small image without a shell.
#
#   docker build -t curvewatch .
#   docker run --rm curvewatch help
#
# docker-compose.yml builds it and runs `curvewatch serve` with the config
# in deploy/curvewatch/.

FROM golang:1.26 AS build
WORKDIR /src
# The modules first, so that a code change does not download them again.
COPY go.mod go.sum ./
RUN go mod download
COPY . .
# A static binary: the runtime image has no C library. Time zones are
# compiled in (time/tzdata), so it needs no zoneinfo files either.
RUN CGO_ENABLED=0 go build -trimpath -ldflags="-s -w" -o /out/curvewatch ./cmd/curvewatch

FROM gcr.io/distroless/static-debian12:nonroot
COPY --from=build /out/curvewatch /usr/local/bin/curvewatch
USER nonroot:nonroot
EXPOSE 9464
ENTRYPOINT ["/usr/local/bin/curvewatch"]
CMD ["serve", "--config", "/etc/curvewatch/curvewatch.yaml"]
