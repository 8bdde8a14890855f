#!/bin/sh
# Installs the Debian packages some external checks read: the Unicode
# Character Database files (unicode-data), a headless browser (chromium) and
# software message catalogues in Serbian Cyrillic and Latin (libgtk-3-common, iso-codes) and
# Hunspell dictionaries (hunspell-cs, -pl, -tr, -de-de).
# Tests that need them skip with a reason when this is not possible.
need=""
[ -f /usr/share/unicode/NormalizationTest.txt.bz2 ] || [ -f /usr/share/unicode/NormalizationTest.txt ] || need="$need unicode-data"
command -v chromium >/dev/null 2>&1 || need="$need chromium"
# Serbian Cyrillic and Latin message catalogues (a real digraphic source for the script checks).
[ -f /usr/share/locale/sr@latin/LC_MESSAGES/gtk30.mo ] || need="$need libgtk-3-common iso-codes"
# Hunspell dictionaries (minimal pairs for the spelling-variant checks).
[ -f /usr/share/hunspell/cs_CZ.dic ] && [ -f /usr/share/hunspell/tr_TR.dic ] || need="$need hunspell-cs hunspell-pl hunspell-tr hunspell-de-de"
[ -z "$need" ] && exit 0
command -v apt-get >/dev/null 2>&1 || { echo "apt-get not available; tests needing$need will skip"; exit 0; }
[ "$(id -u)" = 0 ] || { echo "not root; tests needing$need will skip"; exit 0; }
echo "installing Debian packages:$need"
apt-get update -qq >/dev/null 2>&1
DEBIAN_FRONTEND=noninteractive apt-get install -y -qq $need >/dev/null 2>&1 || echo "could not install$need; those tests will skip"
exit 0
