#!/usr/bin/env bash
# Makes sure the programs the test suite drives for real are on this machine:
#   chromium  the HTML report test opens the report in a headless browser
#   java      the Spark tests run Apache Spark in local mode (Java 17 or newer)
# When one is missing and we run as root on Debian/Ubuntu, it is installed with
# apt-get; otherwise this prints the exact command to run and fails, so a test
# never skips for want of a tool.
set -euo pipefail

have_chromium() { command -v chromium >/dev/null 2>&1 || command -v chromium-browser >/dev/null 2>&1; }
have_java() {
  command -v java >/dev/null 2>&1 || return 1
  local major
  major=$(java -XshowSettings:properties -version 2>&1 | sed -n 's/^ *java.specification.version = //p' | cut -d. -f1)
  [ -n "$major" ] && [ "$major" -ge 17 ]
}

missing=()
for tool in "$@"; do
  case "$tool" in
    chromium) have_chromium || missing+=(chromium) ;;
    java) have_java || missing+=(openjdk-17-jre-headless) ;;
    *) echo "system-tools: unknown tool '$tool'" >&2; exit 2 ;;
  esac
done
[ ${#missing[@]} -eq 0 ] && exit 0

if [ "$(id -u)" = 0 ] && command -v apt-get >/dev/null 2>&1; then
  echo "system-tools: installing ${missing[*]} (Debian packages) for the tests" >&2
  export DEBIAN_FRONTEND=noninteractive
  apt-get update -qq >/dev/null
  apt-get install -y -qq --no-install-recommends "${missing[@]}" >/dev/null
  exit 0
fi
echo "system-tools: the tests need ${missing[*]}; install it, e.g. 'sudo apt-get install ${missing[*]}', then run make test again" >&2
exit 1
