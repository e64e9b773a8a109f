#!/usr/bin/python3
"""verify_unit.py: check the systemd unit as `cmake --install` installs it.

    verify_unit.py --unit BUILD/deploy/plumbline.service \
                   --installed-binary PREFIX/bin/plumbline \
                   --built-binary BUILD/daemon/plumbline

`systemd-analyze verify` checks that ExecStart's program exists and is
executable. The installed binary need not exist on the machine that runs
the tests, so the check runs on a copy of the configured unit whose
ExecStart names the built binary instead; nothing else in the copy differs
from the installed unit. It fails when verify exits non-zero or prints
anything on stderr (verify reports unknown keys and bad values as warnings
and still exits 0).

So that this check cannot pass by checking nothing, broken copies of the
unit (an unknown key, a bad value, a missing program) must each make verify
complain; if one does not, the test fails. The unit must also carry the
settings its documentation promises (user, state directory, reload,
restart, hardening, limits), and `systemd-analyze security --offline`
must rate its exposure at most MAX_EXPOSURE.
"""
import argparse
import os
import re
import subprocess
import sys
import tempfile

# systemd-analyze security rates exposure from 0.0 (fully confined) to 10.0;
# its --threshold takes the rating times ten. 2.0 is this project's own
# bound, not a published one: the unit rates 1.1 with systemd 252, so a
# change that noticeably weakens its hardening fails here.
MAX_EXPOSURE = 2.0

# Settings the unit must have, as systemd reads them (key, value pattern).
REQUIRED = [
    ("DynamicUser", r"yes"),
    ("StateDirectory", r"plumbline"),
    ("ExecReload", r"/bin/kill -HUP \$MAINPID"),
    ("Restart", r"on-failure"),
    ("NoNewPrivileges", r"yes"),
    ("ProtectSystem", r"strict"),
    ("ProtectHome", r"yes"),
    ("PrivateTmp", r"yes"),
    ("PrivateDevices", r"yes"),
    ("RestrictAddressFamilies", r"AF_INET AF_INET6( AF_\w+)*"),
    ("MemoryMax", r"\d+[KMGT]?"),
    ("LimitNOFILE", r"\d+"),
]


def run(cmd):
    p = subprocess.run(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                       timeout=60)
    return p.returncode, p.stdout, p.stderr


def verify(directory, text):
    """Writes `text` as DIRECTORY/plumbline.service and verifies it.

    Returns (ok, report). The path must be absolute: given a relative path,
    systemd-analyze 252 reports nothing even for a unit with unknown keys.
    """
    path = os.path.join(os.path.abspath(directory), "plumbline.service")
    with open(path, "w") as f:
        f.write(text)
    rc, out, err = run(["systemd-analyze", "verify", path])
    report = "exit %d\nstdout:\n%s\nstderr:\n%s" % (rc, out, err)
    return rc == 0 and err == "", report


def settings(text):
    """The unit's KEY=VALUE lines (comments left out), in order."""
    pairs = []
    for line in text.splitlines():
        line = line.strip()
        if not line or line[0] in "#;" or line.startswith("["):
            continue
        key, _, value = line.partition("=")
        pairs.append((key.strip(), value.strip()))
    return pairs


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--unit", required=True)
    ap.add_argument("--installed-binary", required=True)
    ap.add_argument("--built-binary", required=True)
    a = ap.parse_args()

    with open(a.unit) as f:
        unit = f.read()
    failures = []

    # The unit as installed starts the installed binary with the installed
    # configuration.
    starts = [v for k, v in settings(unit) if k == "ExecStart"]
    if len(starts) != 1 or not starts[0].startswith(a.installed_binary + " serve --config "):
        sys.exit("FAIL: the unit needs one ExecStart=%s serve --config ...; it has %r"
                 % (a.installed_binary, starts))
    left = re.findall(r"@[A-Z_]+@", unit)
    if left:
        failures.append("the unit still holds unsubstituted variables: %s" % left)

    for key, pattern in REQUIRED:
        values = [v for k, v in settings(unit) if k == key]
        if not any(re.fullmatch(pattern, v) for v in values):
            failures.append("missing %s=%s (found %r)" % (key, pattern, values))

    checked = unit.replace("ExecStart=" + a.installed_binary + " ",
                           "ExecStart=" + os.path.abspath(a.built_binary) + " ")

    with tempfile.TemporaryDirectory(prefix="plumbline-unit-") as tmp:
        ok, report = verify(tmp, checked)
        print("systemd-analyze verify, the installed unit with ExecStart on the built binary:")
        print(report)
        if not ok:
            failures.append("systemd-analyze verify complained about the unit")

        path = os.path.join(tmp, "plumbline.service")
        rc, out, err = run(["systemd-analyze", "security", "--offline=yes",
                            "--threshold=%d" % round(MAX_EXPOSURE * 10), path])
        print("systemd-analyze security --offline=yes (last lines):")
        print("\n".join(out.strip().splitlines()[-3:]))
        if rc != 0 or err:
            failures.append("systemd-analyze security: exit %d, stderr %r (exposure above %.1f?)"
                            % (rc, err, MAX_EXPOSURE))

        # Negative controls: each broken copy must be reported.
        broken = {
            "an unknown key": checked.replace("ProtectHome=yes\n",
                                              "ProtectHome=yes\nProtectHomeDir=yes\n", 1),
            "a bad value": checked.replace("ProtectSystem=strict\n",
                                           "ProtectSystem=stricter\n", 1),
            "a missing program": checked.replace(
                "ExecStart=" + os.path.abspath(a.built_binary) + " ",
                "ExecStart=" + os.path.join(tmp, "missing", "plumbline") + " ", 1),
        }
        for what, text in broken.items():
            if text == checked:
                failures.append("could not make the copy with %s" % what)
                continue
            with tempfile.TemporaryDirectory(prefix="plumbline-broken-unit-") as btmp:
                ok, report = verify(btmp, text)
            print("negative control, a copy with %s: %s" % (what, report.replace("\n", " | ")))
            if ok:
                failures.append("systemd-analyze verify accepted a unit with %s: "
                                "this check would not see such a mistake" % what)

    if failures:
        for f in failures:
            print("FAIL:", f)
        return 1
    print("PASS")
    return 0


if __name__ == "__main__":
    sys.exit(main())
