#!/bin/sh
# Render an HTML page (e.g. from `envsample check --html PAGE.html` or a batch index.html)
# to a PNG with headless Chromium, to look at a report without a desktop browser.
#
# Usage:   scripts/screenshot.sh PAGE.html OUT.png [WIDTHxHEIGHT]
#          (window size in CSS pixels, default 1280x2000; the page is cut at the height)
#
# Chromium comes from Debian's package:  apt-get update && apt-get install -y chromium
# (set CHROMIUM=/path/to/binary to use another build of the same browser).
#
# The browser runs with a throw-away profile and with background networking, updates
# and sync switched off: envsample pages are self-contained (embedded pictures, no
# scripts), so nothing needs the network.  --no-sandbox is needed when running as root
# (containers, CI); run as an ordinary user where you can and drop it if you like.
set -eu

if [ "$#" -lt 2 ] || [ "$#" -gt 3 ]; then
    echo "usage: $0 PAGE.html OUT.png [WIDTHxHEIGHT]" >&2
    exit 2
fi
page=$1
out=$2
size=${3:-1280x2000}
case $size in
    *[!0-9x]*|x*|*x|*x*x*|'') echo "$0: window size must look like 1280x2000, got '$size'" >&2; exit 2 ;;
    *x*) ;;
    *) echo "$0: window size must look like 1280x2000, got '$size'" >&2; exit 2 ;;
esac
if [ ! -f "$page" ]; then
    echo "$0: $page: no such page; write it first (envsample check MAP --html $page)" >&2
    exit 2
fi
browser=${CHROMIUM:-chromium}
if ! command -v "$browser" >/dev/null 2>&1; then
    echo "$0: $browser not found; install it: apt-get update && apt-get install -y chromium" >&2
    exit 2
fi
out_dir=$(dirname -- "$out")
if [ ! -d "$out_dir" ]; then
    echo "$0: $out_dir: output folder does not exist; create it first" >&2
    exit 2
fi

# Chromium wants absolute paths: a file:// URL for the page and an absolute output path.
page_abs=$(cd -- "$(dirname -- "$page")" && pwd)/$(basename -- "$page")
out_abs=$(cd -- "$out_dir" && pwd)/$(basename -- "$out")
# Percent-encode the characters that would break the URL (the rest of a path is allowed as is).
url=file://$(printf '%s' "$page_abs" | sed -e 's/%/%25/g' -e 's/ /%20/g' -e 's/#/%23/g' -e 's/?/%3F/g')
profile=$(mktemp -d)
trap 'rm -rf -- "$profile"' EXIT INT TERM

rm -f -- "$out_abs"
"$browser" --headless --no-sandbox --disable-gpu --disable-quic --no-first-run \
    --disable-background-networking --disable-component-update --disable-sync \
    --hide-scrollbars --user-data-dir="$profile" \
    --screenshot="$out_abs" --window-size="$(echo "$size" | tr x ,)" "$url" >/dev/null 2>&1 || true
if [ ! -s "$out_abs" ]; then
    echo "$0: chromium wrote no screenshot for $page; rerun its command by hand to see its messages" >&2
    exit 1
fi
echo "wrote $out"
