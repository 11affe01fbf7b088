# The residua solver service in a container.
#
#   docker build -t residua .
#   docker run --rm -p 7447:7447 residua
#
# Two stages: the build stage compiles the static binary with the same
# command as the README's build (CGO_ENABLED=0 go build ./cmd/residua); the
# final image holds only that binary and runs it as an unprivileged user.
# Inside the container the server listens on all interfaces (0.0.0.0), as a
# published port needs; add --token-file and --tls-cert/--tls-key (mounted
# files) before exposing it beyond a trusted network. Orchestrator probes
# can use the standard gRPC health service on the same port.

FROM golang:1.26.8-bookworm AS build
WORKDIR /src
COPY go.mod go.sum ./
RUN go mod download
COPY . .
RUN CGO_ENABLED=0 go build ./cmd/residua

FROM gcr.io/distroless/static-debian12:nonroot
COPY --from=build /src/residua /usr/local/bin/residua
USER nonroot:nonroot
EXPOSE 7447
ENTRYPOINT ["/usr/local/bin/residua", "serve", "--listen", "0.0.0.0:7447"]
