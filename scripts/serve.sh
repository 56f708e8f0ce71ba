#!/usr/bin/env bash
# Builds everything, then serves the page on 127.0.0.1 (port 8080, or $PORT) with a sample loaded.
source "$(dirname "$0")/common.sh"
"$ROOT/scripts/build.sh"
say "serving www/ (Ctrl-C to stop)"
echo "Open this address in a browser:"
exec node "$ROOT/scripts/static-server.mjs" "$ROOT/www" "${PORT:-8080}"
