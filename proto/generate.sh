#!/bin/sh
# Regenerates the code for the residua gRPC API from proto/residua/v1/*.proto:
# the Go code beside the .proto, and the Python stubs of the Python client in
# clients/python/residua/v1/.
#
#   proto/generate.sh           rewrite the generated files in place
#   proto/generate.sh --check   regenerate into a temporary folder and fail
#                               (exit 1, with a diff) if the committed code
#                               is stale; CI runs this
#
# Tools, pinned: protoc is Debian's protobuf-compiler package (3.21.12 on
# bookworm; the version is written into the generated headers, so the check
# needs the same one); protoc-gen-go and protoc-gen-go-grpc are tool
# directives in go.mod, so `go tool` runs exactly the versions go.sum pins;
# the Python gRPC stubs come from grpc_python_plugin, Debian's
# protobuf-compiler-grpc package (1.51.1 on bookworm), whose output matches
# Debian's python3-grpcio. The C++ example (clients/cpp) generates its own
# stubs when it is built, with the same protoc and grpc_cpp_plugin.
# Run from anywhere; paths are relative to the module root.
set -eu

root=$(cd "$(dirname "$0")/.." && pwd)
cd "$root"

command -v protoc >/dev/null 2>&1 || {
	echo "generate.sh: protoc not found; install Debian's protobuf-compiler" >&2
	exit 2
}
gen_py_grpc=$(command -v grpc_python_plugin 2>/dev/null) || {
	echo "generate.sh: grpc_python_plugin not found; install Debian's protobuf-compiler-grpc" >&2
	exit 2
}
gen_go=$(go tool -n protoc-gen-go)
gen_grpc=$(go tool -n protoc-gen-go-grpc)

# The Python stubs live inside the client's package, so that their own
# imports ("from residua.v1 import residua_pb2") resolve within it.
py_out=clients/python

generate() { # $1: output root (the module path is stripped from go_package)
	protoc \
		--plugin=protoc-gen-go="$gen_go" \
		--plugin=protoc-gen-go-grpc="$gen_grpc" \
		--proto_path=proto \
		--go_out="$1" --go_opt=module=github.com/residua/residua \
		--go-grpc_out="$1" --go-grpc_opt=module=github.com/residua/residua \
		proto/residua/v1/*.proto
	mkdir -p "$1/$py_out"
	protoc \
		--plugin=protoc-gen-grpc_python="$gen_py_grpc" \
		--proto_path=proto \
		--python_out="$1/$py_out" --pyi_out="$1/$py_out" --grpc_python_out="$1/$py_out" \
		proto/residua/v1/*.proto
}

# generated lists the committed generated files, one a line.
generated() {
	ls proto/residua/v1/*.pb.go "$py_out"/residua/v1/*_pb2*.py "$py_out"/residua/v1/*_pb2*.pyi 2>/dev/null
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
	for f in "$tmp"/proto/residua/v1/*.go "$tmp/$py_out"/residua/v1/*.py "$tmp/$py_out"/residua/v1/*.pyi; do
		name=${f#"$tmp"/}
		if [ ! -e "$name" ]; then
			echo "generate.sh: $name is missing; run proto/generate.sh and commit it" >&2
			stale=1
		elif ! diff -u "$name" "$f"; then
			stale=1
		fi
	done
	for f in $(generated); do
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
