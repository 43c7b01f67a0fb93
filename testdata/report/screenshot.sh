#!/bin/sh
# screenshot.sh REPORT.html OUT.png — render a counterpart HTML report in
# headless Chromium (Debian's /usr/bin/chromium) and save a 1280×4000 PNG
# (WINDOW_SIZE=W,H overrides the size, CHROMIUM the browser path).
#
# The flags keep the browser off the network and out of the user's
# profile: a report must render with nothing fetched, so any missing piece
# shows up in the picture instead of being loaded from somewhere.
set -eu
if [ $# -ne 2 ]; then
	echo "usage: $0 REPORT.html OUT.png" >&2
	exit 2
fi
in=$1
out=$2
browser=${CHROMIUM:-/usr/bin/chromium}
if [ ! -x "$browser" ]; then
	echo "screenshot.sh: $browser not found; apt-get install -y chromium" >&2
	exit 1
fi
case $in in
/*) ;;
*) in=$(pwd)/$in ;;
esac
case $out in
/*) ;;
*) out=$(pwd)/$out ;;
esac
profile=$(mktemp -d)
trap 'rm -rf "$profile"' EXIT
rm -f "$out"
# Chromium may print harmless D-Bus and GPU warnings on stderr; success is
# judged by the PNG it writes.
"$browser" --headless --no-sandbox --disable-gpu --disable-quic --no-first-run \
	--disable-background-networking --disable-component-update --disable-sync \
	--user-data-dir="$profile" --window-size="${WINDOW_SIZE:-1280,4000}" \
	--screenshot="$out" "file://$in" >"$profile/log" 2>&1 || {
	cat "$profile/log" >&2
	exit 1
}
if [ ! -s "$out" ]; then
	echo "screenshot.sh: chromium wrote no screenshot" >&2
	cat "$profile/log" >&2
	exit 1
fi
echo "$out"
