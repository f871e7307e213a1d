"""The command line behaves alike in every command. The rules are those of the
Command Line Interface Guidelines (clig.dev: "Errors", "Arguments and flags",
"Help"), a published guide; where a rule is only the trade's habit it says
"common practice". Each check runs the tool as a user would.

- One error prefix: every error is one line "strayline COMMAND: ...".
- A mistyped long option gets "did you mean --X?" (clig.dev: "If the user did
  something wrong and you can guess what they meant, suggest it").
- `strayline help COMMAND` prints what `strayline COMMAND --help` prints.
- "-" is standard input where a file is read and standard output where one is
  written (clig.dev: "If input or output is a file, support - to read from
  stdin or write to stdout"); a measurement set cannot come from standard input
  (its profile files are named relative to its folder) and says so.
- -o/--output is the main output file in every command that has one.
- The plan/structure-set mismatch names --allow-mismatch; a measurement set
  given as a model file says to run `strayline fit`; a missing output folder
  says "no such directory".
"""
import json
import os
import shutil
import subprocess
import unittest

from common import SOURCE_ROOT, STRAYLINE, run, tempdir

FACE = os.path.join(SOURCE_ROOT, "examples", "face-lens")
CHEST = os.path.join(SOURCE_ROOT, "examples", "chest-fetus")
PLAN = os.path.join(FACE, "rtplan.dcm")
SS = os.path.join(FACE, "rtstruct.dcm")
MODEL = os.path.join(SOURCE_ROOT, "models", "demo-e1.yaml")
MEAS = os.path.join(SOURCE_ROOT, "examples", "commissioning", "demo-e1", "measurements.yaml")
COMMANDS = ["inspect", "locate", "fit", "model", "estimate", "invivo"]


def run_stdin(data, *args):
    p = subprocess.run([STRAYLINE] + [str(a) for a in args], input=data, capture_output=True,
                       timeout=300)
    return p.returncode, p.stdout, p.stderr.decode()


class Cli(unittest.TestCase):
    def one_error(self, command, args, code, *fragments):
        """Exit code, one line on stderr with the command's prefix, nothing on
        stdout."""
        rc, out, err = run(command, *args)
        self.assertEqual(rc, code, err)
        lines = err.strip().splitlines()
        self.assertEqual(len(lines), 1, err)
        self.assertTrue(lines[0].startswith("strayline %s: " % command), lines[0])
        for f in fragments:
            self.assertIn(f, lines[0])
        self.assertEqual(out, "")
        return lines[0]

    # one error prefix --------------------------------------------------------
    def test_every_command_names_itself_in_errors(self):
        with tempdir() as d:
            missing = os.path.join(d, "nope.dcm")
            self.one_error("inspect", [missing], 3, missing)
            self.one_error("locate", [missing, SS], 3, missing)
            self.one_error("fit", [os.path.join(d, "nope.yaml"), "-o", os.path.join(d, "m.yaml")],
                           3, "nope.yaml")
            self.one_error("model", ["show", os.path.join(d, "nope.yaml")], 3, "nope.yaml")
            self.one_error("estimate", ["--model", os.path.join(d, "nope.yaml"), PLAN, SS], 3,
                           "nope.yaml")

    def test_warnings_carry_the_prefix(self):
        """A profile with a row inside the field (negative distance) is fitted
        without it, with a warning on stderr that names the command."""
        with tempdir() as d:
            dst = os.path.join(d, "set")
            shutil.copytree(os.path.dirname(MEAS), dst)
            csv = os.path.join(dst, "profiles", "e06_a06_open_d1.50.csv")
            with open(csv) as f:
                head, rest = f.read().split("\n", 1)
            with open(csv, "w") as f:
                f.write(head + "\n-0.5,80\n" + rest)
            rc, out, err = run("fit", os.path.join(dst, "measurements.yaml"), "-q", "-o",
                               os.path.join(d, "m.yaml"))
            self.assertEqual(rc, 0, err)
            warnings = [ln for ln in err.splitlines() if "warning:" in ln]
            self.assertTrue(warnings, err)
            for ln in warnings:
                self.assertTrue(ln.startswith("strayline fit: warning: "), ln)

    # did you mean ------------------------------------------------------------
    def test_mistyped_option_in_every_command(self):
        """A transposition and a dropped letter (one edit each) are suggested;
        a word far from every option is not."""
        cases = {
            "inspect": (["--fromat", "json", PLAN], "--format"),
            "locate": (["--treads", "2", PLAN, SS], "--threads"),
            "fit": (["--reprot", "r.html", MEAS], "--report"),
            "model": (["show", "--fromat", "json", MODEL], "--format"),
            "estimate": (["--modle", MODEL, PLAN, SS], "--model"),
        }
        for command, (args, want) in cases.items():
            line = self.one_error(command, args, 2, "did you mean %s?" % want)
            self.assertIn("--help", line)
        line = self.one_error("inspect", ["--colour", PLAN], 2, "unknown option --colour")
        self.assertNotIn("did you mean", line)

    def test_other_option_faults_are_named(self):
        self.one_error("inspect", [PLAN, "--format"], 2, "--format needs a value")
        self.one_error("fit", ["--quiet=yes", MEAS], 2, "--quiet takes no value")
        self.one_error("model", ["eval", MODEL, "--app", "A06"], 2, "--app is ambiguous",
                       "--applicator", "--applicator-distance")
        self.one_error("locate", ["-Z", PLAN, SS], 2, "unknown option -Z")

    def test_mistyped_command_and_subcommand(self):
        rc, out, err = run("inspcet", PLAN)
        self.assertEqual(rc, 2)
        self.assertIn("unknown command 'inspcet': did you mean inspect?", err)
        self.one_error("model", ["shwo", MODEL], 2, "did you mean show?")

    # help COMMAND ------------------------------------------------------------
    def test_help_command_is_command_help(self):
        for command in COMMANDS:
            rc1, out1, err1 = run("help", command)
            rc2, out2, err2 = run(command, "--help")
            self.assertEqual((rc1, rc2), (0, 0), command)
            self.assertEqual(out1, out2, command)
            self.assertTrue(out1.startswith("usage: strayline %s" % command), command)
        rc, out, err = run("help")
        self.assertEqual(rc, 0)
        self.assertIn("strayline help COMMAND", out)
        rc, out, err = run("help", "estimat")
        self.assertEqual(rc, 2)
        self.assertIn("did you mean estimate?", err)

    # "-" for standard input and output ---------------------------------------
    def test_dash_reads_dicom_from_standard_input(self):
        with open(PLAN, "rb") as f:
            plan = f.read()
        rc, out, err = run_stdin(plan, "inspect", "--format", "json", "-")
        self.assertEqual(rc, 0, err)
        rc2, out2, err2 = run("inspect", "--format", "json", PLAN)
        a, b = json.loads(out), json.loads(out2.encode())
        self.assertEqual(a["files"][0]["file"], "standard input")
        # the same plan read either way: everything but the file's name agrees
        a["files"][0]["file"] = b["files"][0]["file"]
        self.assertEqual(a["files"], b["files"])
        rc, out, err = run_stdin(plan, "locate", "--format", "json", "-", SS)
        self.assertEqual(rc, 0, err)
        rc, out, err = run_stdin(plan, "locate", "-", "-")
        self.assertEqual(rc, 2)
        self.assertIn("standard input", err)

    def test_dash_model_from_standard_input(self):
        with open(MODEL, "rb") as f:
            data = f.read()
        rc, out, err = run_stdin(data, "model", "show", "--format", "json", "-")
        self.assertEqual(rc, 0, err)
        rc2, out2, err2 = run("model", "show", "--format", "json", MODEL)
        a, b = json.loads(out), json.loads(out2)
        # the report names where the model came from; the SHA-256 (nettle) of
        # the same bytes is the same, and so is everything else
        self.assertEqual(a.pop("model_file"), "standard input")
        self.assertEqual(b.pop("model_file"), MODEL)
        self.assertEqual(a, b)

    def test_measurement_set_from_standard_input_is_refused_with_the_reason(self):
        with open(MEAS, "rb") as f:
            rc, out, err = run_stdin(f.read(), "fit", "-", "-o", "m.yaml")
        self.assertEqual(rc, 2)
        self.assertIn("relative to its own folder", err)
        self.assertTrue(err.startswith("strayline fit: "))

    def test_dash_output_is_standard_output(self):
        """fit -o - writes the model file to standard output, byte for byte
        what -o FILE writes, and moves its summary to standard error."""
        with tempdir() as d:
            fixed = ["--created", "2026-01-01T00:00:00Z", "--model-version", "t", "-q"]
            path = os.path.join(d, "m.yaml")
            rc, out, err = run("fit", MEAS, "-o", path, *fixed)
            self.assertEqual(rc, 0, err)
            self.assertIn("profiles fitted", out)
            p = subprocess.run([STRAYLINE, "fit", MEAS, "-o", "-"] + fixed, capture_output=True,
                               timeout=300)
            self.assertEqual(p.returncode, 0, p.stderr)
            with open(path, "rb") as f:
                self.assertEqual(p.stdout, f.read())
            self.assertIn(b"profiles fitted", p.stderr)
            self.one_error("fit", [MEAS, "-o", "-", "-r", "-"], 2, "standard output")

    # -o the main output --------------------------------------------------------
    def test_output_option_writes_the_main_output(self):
        with tempdir() as d:
            for command, args in (("inspect", ["--format", "json", PLAN]),
                                  ("locate", ["--format", "json", PLAN, SS]),
                                  ("model", ["show", "--format", "json", MODEL])):
                path = os.path.join(d, command + ".json")
                rc, out, err = run(command, *args, "-o", path)
                self.assertEqual(rc, 0, err)
                self.assertEqual(out, "")
                rc2, out2, err2 = run(command, *args)
                with open(path) as f:
                    self.assertEqual(json.load(f), json.loads(out2), command)
                rc3, out3, err3 = run(command, *args, "--output", "-")
                self.assertEqual(out3, out2, command)
            self.one_error("inspect", [PLAN, "-o", PLAN], 2, "refusing to write over an input")

    # messages that say what to do --------------------------------------------
    def test_mismatch_names_the_option(self):
        other = os.path.join(CHEST, "rtstruct.dcm")
        self.one_error("locate", [PLAN, other], 3, "do not belong together", "--allow-mismatch")
        self.one_error("estimate", ["--model", MODEL, PLAN, other], 3, "--allow-mismatch")

    def test_measurement_set_as_model(self):
        for command, args in (("estimate", ["--model", MEAS, PLAN, SS]),
                              ("model", ["show", MEAS]),
                              ("locate", ["--model", MEAS, PLAN, SS])):
            self.one_error(command, args, 3, MEAS, "this is a measurement set",
                           "run `strayline fit")

    def test_model_given_to_fit(self):
        with tempdir() as d:
            self.one_error("fit", [MODEL, "-o", os.path.join(d, "m.yaml")], 3, MODEL,
                           "this is a model file")

    def test_missing_output_directory(self):
        with tempdir() as d:
            gone = os.path.join(d, "no", "such")
            self.one_error("fit", [MEAS, "-q", "-o", os.path.join(gone, "m.yaml")], 1,
                           "no such directory: " + gone)
            self.one_error("inspect", [PLAN, "-o", os.path.join(gone, "x.txt")], 1,
                           "no such directory: " + gone)
            self.one_error("estimate", ["--model", MODEL, PLAN, SS, "--html",
                                        os.path.join(gone, "r.html")], 1,
                           "no such directory: " + gone)
            self.assertEqual(os.listdir(d), [])

    # memory -----------------------------------------------------------------
    @unittest.skipIf(os.environ.get("SL_SANITIZED", "none") != "none",
                     "a sanitizer's shadow memory does not fit under a data-segment limit")
    def test_memory_limits_change_nothing(self):
        """A command that works through one case takes its memory in large
        steps (src/cli/memory.c) only without a limit on the data segment or
        the address space: under `ulimit -d` or `ulimit -v` it runs with
        glibc's defaults and writes the same report (a run that fitted in the
        limit must still fit; the reserved top pad would count against it)."""
        import resource

        def limited(kind, mb):
            def cap():
                resource.setrlimit(kind, (mb << 20, mb << 20))
            return cap

        with tempdir() as d:
            outs = []
            for cap in (None, limited(resource.RLIMIT_DATA, 200),
                        limited(resource.RLIMIT_AS, 1500)):
                path = os.path.join(d, "e%d.json" % len(outs))
                p = subprocess.run([STRAYLINE, "estimate", PLAN, SS, "--model", MODEL,
                                    "--format", "json", "-o", path],
                                   capture_output=True, text=True, timeout=300, preexec_fn=cap)
                self.assertEqual(p.returncode, 4, p.stderr)
                with open(path, "rb") as f:
                    outs.append(f.read())
            self.assertEqual(outs[1], outs[0])
            self.assertEqual(outs[2], outs[0])


if __name__ == "__main__":
    unittest.main()
