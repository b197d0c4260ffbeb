# Sourced by .ci/run: install headless Chromium from the distribution's packages when it is missing,
# so that the report's browser tests (tests/test_report_browser.py) run in CI instead of skipping.
# Needs root and apt-get; without them the tests skip and say why.
install_chromium() {
  if command -v chromium >/dev/null 2>&1 || command -v chromium-browser >/dev/null 2>&1; then
    return 0
  fi
  if [ "$(id -u)" != 0 ] || ! command -v apt-get >/dev/null 2>&1; then
    echo "no Chromium and no way to install it here: the browser tests of the report will skip"
    return 1
  fi
  echo "installing Chromium from the distribution's packages (for the report's browser tests)"
  (apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq --no-install-recommends chromium) \
    >/tmp/fewshot-chromium-install.log 2>&1 \
    || { echo "Chromium could not be installed (see /tmp/fewshot-chromium-install.log): the browser tests will skip"; return 1; }
}
install_chromium || true
