#!/bin/sh
# The Debian packages CI needs beyond the build's own: clang with libFuzzer
# and the sanitizer runtimes for `make fuzz`, and valgrind for `make valgrind`.
exec sh "$(dirname "$0")/install-deps.sh" clang libclang-rt-14-dev valgrind
