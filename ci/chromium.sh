#!/usr/bin/env bash
# Installs headless Chromium (`chromium-headless-shell`), the browser the report-page test
# loads the HTML reports in (crates/tidewise/tests/report_browser.rs). Idempotent and quiet
# when it is present.
# Usage: bash ci/chromium.sh
set -euo pipefail
cd "$(dirname "$0")"
bash apt-install.sh chromium-headless-shell chromium-headless-shell "headless Chromium"
