#!/usr/bin/env bash
# WeasyPrint renders with Pango; the layout tests read the PDF with poppler's pdftotext. Install what is
# missing from Debian's packages when we can (root with apt-get); without Pango nothing can render.
set -euo pipefail
have_pango() { ldconfig -p 2>/dev/null | grep -q 'libpango-1.0.so.0' && ldconfig -p | grep -q 'libpangoft2-1.0.so.0'; }
if have_pango && command -v pdftotext >/dev/null; then
  exit 0
fi
if [ "$(id -u)" -ne 0 ] || ! command -v apt-get >/dev/null; then
  if have_pango; then
    echo "note: poppler's pdftotext is missing (Debian: poppler-utils); the PDF layout tests will be skipped" >&2
    exit 0
  fi
  echo "reportgen needs Pango (Debian: libpango-1.0-0 libpangoft2-1.0-0); install it and re-run" >&2
  exit 1
fi
apt-get update -qq
DEBIAN_FRONTEND=noninteractive apt-get install -y -qq libpango-1.0-0 libpangoft2-1.0-0 fonts-dejavu-core \
  poppler-utils >/dev/null
