#!/bin/sh
# The layering rule of DEVELOPERS.md: the core does no I/O (make check-layering).
exec sh tests/check-layering.sh
