#!/usr/bin/python3
"""install_check.py: `cmake --install` into a temporary DESTDIR, then check it.

    install_check.py --cmake CMAKE --build-dir BUILD --prefix PREFIX
                     --bindir DIR --sysconfdir DIR --datadir DIR --docdir DIR
                     --unitdir DIR

The directories are the absolute install paths CMake configured
(GNUInstallDirs' CMAKE_INSTALL_FULL_*). The check installs the build into a
fresh DESTDIR and looks for every file deploy/CMakeLists.txt promises; runs
the installed binary's `check-config` on the installed configuration and on
the installed example (which needs its reference CSV beside it); runs
`promtool check config` on the installed Prometheus files; checks that the
installed unit starts the installed binary with the installed configuration;
installs a second time and checks that an edited configuration is kept; and
checks that an install to another prefix than the configured one is refused
before anything is written.
"""
import argparse
import filecmp
import os
import shlex
import subprocess
import sys
import tempfile


def run(cmd, env=None):
    p = subprocess.run(cmd, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                       timeout=300)
    return p.returncode, p.stdout, p.stderr


def staged(destdir, path):
    return os.path.join(destdir, path.lstrip("/"))


def install(a, destdir, *extra):
    env = dict(os.environ, DESTDIR=destdir)
    return run([a.cmake, "--install", a.build_dir] + list(extra), env=env)


def main():
    ap = argparse.ArgumentParser()
    for opt in ("cmake", "build-dir", "prefix", "bindir", "sysconfdir", "datadir", "docdir",
                "unitdir"):
        ap.add_argument("--" + opt, required=True)
    a = ap.parse_args()
    failures = []

    config = os.path.join(a.sysconfdir, "plumbline", "plumbline.toml")
    binary = os.path.join(a.bindir, "plumbline")
    unit = os.path.join(a.unitdir, "plumbline.service")
    expected = {
        binary: "the daemon",
        config: "the service's configuration",
        unit: "the systemd unit",
        os.path.join(a.datadir, "plumbline", "prometheus", "prometheus.yml"): "scrape config",
        os.path.join(a.datadir, "plumbline", "prometheus", "plumbline_rules.yml"): "alert rules",
        os.path.join(a.docdir, "README.md"): "README",
        os.path.join(a.docdir, "LICENSE"): "licence",
        os.path.join(a.docdir, "examples", "plumbline.example.toml"): "example configuration",
        os.path.join(a.docdir, "examples", "larkspur_hold_temp_reference.csv"):
            "the example's reference file",
    }

    with tempfile.TemporaryDirectory(prefix="plumbline-install-") as destdir:
        rc, out, err = install(a, destdir)
        print("cmake --install %s with DESTDIR=%s: exit %d" % (a.build_dir, destdir, rc))
        print(out + err)
        if rc != 0:
            print("FAIL: cmake --install failed")
            return 1

        for path, what in expected.items():
            p = staged(destdir, path)
            if not os.path.isfile(p):
                failures.append("%s (%s) is not installed" % (path, what))
        if not os.access(staged(destdir, binary), os.X_OK):
            failures.append("%s is not executable" % binary)
        for root, _, files in os.walk(destdir):
            for f in sorted(files):
                print("installed:", os.path.relpath(os.path.join(root, f), destdir))

        # The installed unit is the one tests/deploy verifies, and it starts
        # the installed binary with the installed configuration.
        built_unit = os.path.join(a.build_dir, "deploy", "plumbline.service")
        if os.path.isfile(staged(destdir, unit)):
            if not filecmp.cmp(staged(destdir, unit), built_unit, shallow=False):
                failures.append("the installed unit differs from %s" % built_unit)
            with open(staged(destdir, unit)) as f:
                starts = [line[len("ExecStart="):].strip() for line in f
                          if line.startswith("ExecStart=")]
            want = [binary, "serve", "--config", config]
            if len(starts) != 1 or shlex.split(starts[0])[:4] != want:
                failures.append("the unit's ExecStart is %r, not %r" % (starts, " ".join(want)))

        # The installed binary accepts both installed configurations.
        for cfg in (config, os.path.join(a.docdir, "examples", "plumbline.example.toml")):
            rc, out, err = run([staged(destdir, binary), "check-config", staged(destdir, cfg)])
            print("plumbline check-config %s: exit %d %s" % (cfg, rc, (out + err).strip()))
            if rc != 0:
                failures.append("the installed %s does not pass check-config" % cfg)

        prom = staged(destdir, os.path.join(a.datadir, "plumbline", "prometheus",
                                            "prometheus.yml"))
        rc, out, err = run(["promtool", "check", "config", prom])
        print("promtool check config (installed): exit %d" % rc)
        if rc != 0:
            failures.append("promtool check config fails on the installed files:\n" + out + err)

        # A second install keeps the operator's configuration.
        staged_config = staged(destdir, config)
        if os.path.isfile(staged_config):
            with open(staged_config, "a") as f:
                f.write("# edited by the operator\n")
            rc, out, err = install(a, destdir)
            with open(staged_config) as f:
                kept = f.read().endswith("# edited by the operator\n")
            print("second install: exit %d, edited configuration kept: %s" % (rc, kept))
            if rc != 0 or not kept:
                failures.append("a second install did not keep the edited configuration")
            if "Keeping existing: " + staged_config not in out:
                failures.append("a second install did not say it kept the configuration")

    # An install to another prefix is refused, and writes nothing.
    with tempfile.TemporaryDirectory(prefix="plumbline-install-") as destdir:
        other = "/opt/plumbline-elsewhere"
        rc, out, err = install(a, destdir, "--prefix", other)
        written = [os.path.join(r, f) for r, _, fs in os.walk(destdir) for f in fs]
        print("cmake --install --prefix %s: exit %d, files written %d" % (other, rc, len(written)))
        print((out + err).strip())
        if rc == 0 or "configured for the install prefix" not in out + err:
            failures.append("an install with --prefix %s was not refused with a message" % other)
        if written:
            failures.append("a refused install wrote files: %s" % written)

    for f in failures:
        print("FAIL:", f)
    if failures:
        return 1
    print("PASS")
    return 0


if __name__ == "__main__":
    sys.exit(main())
