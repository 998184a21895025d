#!/usr/bin/env bash
# WeasyPrint renders with Pango; install it from Debian's packages when it is missing.
set -euo pipefail
if ldconfig -p 2>/dev/null | grep -q 'libpango-1.0.so.0' && ldconfig -p | grep -q 'libpangoft2-1.0.so.0'; then
  exit 0
fi
if [ "$(id -u)" -ne 0 ] || ! command -v apt-get >/dev/null; then
  echo "reportgen needs Pango (Debian: libpango-1.0-0 libpangoft2-1.0-0); install it and re-run" >&2
  exit 1
fi
apt-get update -qq
DEBIAN_FRONTEND=noninteractive apt-get install -y -qq libpango-1.0-0 libpangoft2-1.0-0 fonts-dejavu-core >/dev/null
