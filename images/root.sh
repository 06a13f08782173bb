#!/bin/sh
# root.sh DEST writes the file tree that both almanac images hold besides their binary:
#
#   /etc/passwd, /etc/group               the non-root user and group 65532 (runAsNonRoot needs
#                                         a numeric uid; os/user and tools find its name)
#   /etc/ssl/certs/ca-certificates.crt    Debian's ca-certificates bundle (the trainer reaches
#                                         s3, gs and azblob over TLS)
#   /usr/share/zoneinfo                   Debian's tzdata (the controller resolves schedule time
#                                         zones; Go reads this directory)
#   /tmp                                  empty, mode 1777, for an emptyDir mount
#
# Both ways of building the images run this script: the Dockerfile's build stage inside the Go
# image (Debian bookworm, after apt-get install ca-certificates tzdata), and `make images` on
# the build machine, which needs the same two Debian packages. DEST must not exist yet.
set -eu
dest=${1:?usage: root.sh DEST}
if [ -e "$dest" ]; then
	echo "root.sh: $dest exists; give a new directory" >&2
	exit 2
fi
for f in /etc/ssl/certs/ca-certificates.crt /usr/share/zoneinfo/UTC; do
	if [ ! -e "$f" ]; then
		echo "root.sh: $f missing: install Debian's ca-certificates and tzdata" >&2
		exit 2
	fi
done
umask 022
mkdir -p "$dest/etc/ssl/certs" "$dest/usr/share" "$dest/tmp"
chmod 1777 "$dest/tmp"
echo 'nonroot:x:65532:65532:nonroot:/nonexistent:/sbin/nologin' >"$dest/etc/passwd"
echo 'nonroot:x:65532:' >"$dest/etc/group"
# The bundle is a file that update-ca-certificates writes; copy its content, not a link.
cp -L /etc/ssl/certs/ca-certificates.crt "$dest/etc/ssl/certs/ca-certificates.crt"
chmod 0644 "$dest/etc/ssl/certs/ca-certificates.crt" "$dest/etc/passwd" "$dest/etc/group"
# zoneinfo keeps its relative symbolic links (aliases such as posixrules), as COPY does. Its
# one absolute link, localtime -> /etc/localtime, would dangle in the image: dropped.
cp -R -P /usr/share/zoneinfo "$dest/usr/share/zoneinfo"
rm -f "$dest/usr/share/zoneinfo/localtime"
