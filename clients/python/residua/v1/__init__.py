"""The generated protobuf and gRPC stubs of proto/residua/v1/residua.proto
(regenerate with proto/generate.sh; CI checks that they are current)."""
