#!/bin/sh
# Regenerates the Go code for the residua gRPC API from proto/residua/v1/*.proto.
#
#   proto/generate.sh           rewrite proto/residua/v1/*.pb.go in place
#   proto/generate.sh --check   regenerate into a temporary folder and fail
#                               (exit 1, with a diff) if the committed code
#                               is stale; CI runs this
#
# Tools, pinned: protoc is Debian's protobuf-compiler package (3.21.12 on
# bookworm; the version is written into the generated headers, so the check
# needs the same one); protoc-gen-go and protoc-gen-go-grpc are tool
# directives in go.mod, so `go tool` runs exactly the versions go.sum pins.
# Run from anywhere; paths are relative to the module root.
set -eu

root=$(cd "$(dirname "$0")/.." && pwd)
cd "$root"

command -v protoc >/dev/null 2>&1 || {
	echo "generate.sh: protoc not found; install Debian's protobuf-compiler" >&2
	exit 2
}
gen_go=$(go tool -n protoc-gen-go)
gen_grpc=$(go tool -n protoc-gen-go-grpc)

generate() { # $1: output root (the module path is stripped from go_package)
	protoc \
		--plugin=protoc-gen-go="$gen_go" \
		--plugin=protoc-gen-go-grpc="$gen_grpc" \
		--proto_path=proto \
		--go_out="$1" --go_opt=module=github.com/residua/residua \
		--go-grpc_out="$1" --go-grpc_opt=module=github.com/residua/residua \
		proto/residua/v1/*.proto
}

case "${1:-}" in
"")
	generate "$root"
	;;
--check)
	tmp=$(mktemp -d)
	trap 'rm -rf "$tmp"' EXIT
	generate "$tmp"
	stale=0
	for f in "$tmp"/proto/residua/v1/*.go; do
		name=proto/residua/v1/$(basename "$f")
		if ! diff -u "$name" "$f"; then
			stale=1
		fi
	done
	for f in proto/residua/v1/*.pb.go; do
		[ -e "$tmp/$f" ] || { echo "generate.sh: $f is not generated from any .proto" >&2; stale=1; }
	done
	if [ "$stale" -ne 0 ]; then
		echo "generate.sh: generated code is stale; run proto/generate.sh and commit the result" >&2
		exit 1
	fi
	echo "generate.sh: generated code is up to date"
	;;
*)
	echo "usage: proto/generate.sh [--check]" >&2
	exit 2
	;;
esac
