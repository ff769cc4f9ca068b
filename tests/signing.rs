//! Sign-off: key pairs, detached signatures of the run manifest, and their verification
//! (Ed25519, RFC 8032, through ed25519-dalek; the test vector is checked in the engine's unit
//! tests).

use std::path::Path;

use crate::support::{Outcome, arg, cli, demo_copy, keygen, run_into_folder, scratch};

fn verify(run: &Path, trusted: Option<&Path>) -> Outcome {
    let mut args = vec!["verify", arg(run)];
    if let Some(t) = trusted {
        args.extend(["--trusted-keys", arg(t)]);
    }
    cli(&args)
}

#[test]
fn two_signers_sign_and_verify_names_who_signed_what() {
    let (run, o) = run_into_folder(&demo_copy("sign-run"), "lin-b");
    assert_eq!(o.code, 0, "{}", o.stderr);
    let keys = scratch("sign-keys");
    let ada = keys.join("ada.key");
    let made = cli(&[
        "keygen",
        "--name",
        "Ada Example",
        "--role",
        "medical physicist",
        "--out",
        arg(&ada),
    ]);
    assert_eq!(made.code, 0, "{}", made.stderr);
    let bo = keygen(&keys, "Bo Chief", "chief physicist", "bo.key");
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt as _;
        let mode = std::fs::metadata(&ada).expect("meta").permissions().mode();
        assert_eq!(mode & 0o777, 0o600, "the secret key is owner-only");
    }
    // A key file is never overwritten and the secret is never printed.
    let o = cli(&["keygen", "--name", "X", "--role", "Y", "--out", arg(&ada)]);
    assert_eq!(o.code, 2);
    assert!(
        o.stderr
            .contains("already exists; key files are never overwritten")
    );
    let secret = std::fs::read_to_string(&ada).expect("key");
    let secret_hex = secret
        .lines()
        .last()
        .expect("line")
        .trim_start_matches("secret-key: ");
    assert_eq!(secret_hex.len(), 64);
    assert!(!made.stdout.contains(secret_hex) && !made.stderr.contains(secret_hex));
    let before: Vec<_> = ["results.json", "report.pdf", "manifest.sha256"]
        .iter()
        .map(|f| std::fs::read(run.join(f)).expect("read"))
        .collect();
    let o = cli(&[
        "sign",
        arg(&run),
        "--key",
        arg(&ada),
        "--date",
        "2026-11-21",
    ]);
    assert_eq!(o.code, 0, "{}", o.stderr);
    let o = cli(&[
        "sign",
        arg(&run),
        "--key",
        arg(&bo),
        "--date",
        "2026-11-22",
        "--statement",
        "Approved for clinical use.",
    ]);
    assert_eq!(o.code, 0, "{}", o.stderr);
    // Signing changes no existing file.
    for (f, b) in ["results.json", "report.pdf", "manifest.sha256"]
        .iter()
        .zip(&before)
    {
        assert_eq!(&std::fs::read(run.join(f)).expect("read"), b, "{f} changed");
    }
    let trusted = scratch("sign-trusted");
    std::fs::copy(keys.join("ada.key.pub"), trusted.join("ada.pub")).expect("copy");
    let o = verify(&run, Some(&trusted));
    assert!(o.stdout.contains(
        "signed: Ada Example (medical physicist) on 2026-11-21: \"I have reviewed this commissioning run and its report.\" [signatures/01-ada-example.sig; valid; trusted key; saw verdict GO]\n"
    ), "{}", o.stdout);
    assert!(o.stdout.contains(
        "signed: Bo Chief (chief physicist) on 2026-11-22: \"Approved for clinical use.\" [signatures/02-bo-chief.sig; valid; UNKNOWN key (not in the trusted keys); saw verdict GO]\n"
    ));
    assert_eq!(
        o.code, 3,
        "an unknown key fails a check against trusted keys"
    );
    std::fs::copy(keys.join("bo.key.pub"), trusted.join("bo.pub")).expect("copy");
    assert_eq!(verify(&run, Some(&trusted)).code, 0);
}

#[test]
fn altered_signatures_and_manifests_are_detected() {
    let (run, _) = run_into_folder(&demo_copy("sign-tamper"), "lin-b");
    let keys = scratch("sign-tamper-keys");
    let ada = keygen(&keys, "Ada Example", "medical physicist", "ada.key");
    assert_eq!(
        cli(&[
            "sign",
            arg(&run),
            "--key",
            arg(&ada),
            "--date",
            "2026-11-21"
        ])
        .code,
        0
    );
    let sig = run.join("signatures/01-ada-example.sig");
    let original = std::fs::read_to_string(&sig).expect("sig");
    // The statement edited after signing.
    std::fs::write(
        &sig,
        original.replace("I have reviewed", "I have not reviewed"),
    )
    .expect("w");
    let o = verify(&run, None);
    assert_eq!(o.code, 3);
    assert!(o.stdout.contains("INVALID signature signatures/01-ada-example.sig: the signature does not match its content (the file was altered or forged)\n"), "{}", o.stdout);
    std::fs::write(&sig, &original).expect("restore");
    assert_eq!(verify(&run, None).code, 0);
    // The manifest replaced (with any change): the signature no longer covers the run.
    let manifest = run.join("manifest.sha256");
    let m = std::fs::read_to_string(&manifest).expect("m");
    let mut edited = m.clone();
    edited.push('\n');
    std::fs::write(&manifest, edited).expect("w");
    let o = verify(&run, None);
    assert_eq!(o.code, 3);
    assert!(
        o.stdout
            .contains("INVALID signature signatures/01-ada-example.sig: it signs manifest "),
        "{}",
        o.stdout
    );
}

#[test]
fn bad_keys_and_unverifiable_runs_are_refused() {
    let (run, _) = run_into_folder(&demo_copy("sign-bad"), "lin-b");
    let keys = scratch("sign-bad-keys");
    let ada = keygen(&keys, "Ada Example", "medical physicist", "ada.key");
    // A corrupt key file: its public key no longer belongs to its secret.
    let k = std::fs::read_to_string(&ada).expect("key");
    let broken = keys.join("broken.key");
    let public_line = k.lines().nth(3).expect("public");
    let flipped = public_line.replacen("public-key: ", "public-key: 0", 1);
    std::fs::write(
        &broken,
        k.replace(public_line, &flipped[..public_line.len()]),
    )
    .expect("w");
    let o = cli(&["sign", arg(&run), "--key", arg(&broken)]);
    assert_eq!(o.code, 2);
    assert!(o.stderr.contains("is not a valid beamproof key file: its public key does not belong to its secret key (the file was altered)"), "{}", o.stderr);
    // A run whose files do not match its manifest cannot be signed.
    std::fs::write(run.join("results.json"), "{}").expect("w");
    let o = cli(&["sign", arg(&run), "--key", arg(&ada)]);
    assert_eq!(o.code, 2);
    assert!(
        o.stderr
            .contains("fails verification (changed: results.json); it cannot be signed"),
        "{}",
        o.stderr
    );
    assert!(!run.join("signatures").exists());
}

#[test]
fn a_signature_names_the_holder_the_trusted_key_records_or_is_invalid() {
    let (run, _) = run_into_folder(&demo_copy("sign-identity"), "lin-b");
    let keys = scratch("sign-identity-keys");
    let ada = keygen(&keys, "Ada Example", "medical physicist", "ada.key");
    // Ada edits the name and role lines of her own secret key file and signs as the chief.
    let text = std::fs::read_to_string(&ada).expect("key");
    let forged = keys.join("forged.key");
    std::fs::write(
        &forged,
        text.replace("name: Ada Example", "name: Bo Chief")
            .replace("role: medical physicist", "role: chief physicist"),
    )
    .expect("write");
    let o = cli(&[
        "sign",
        arg(&run),
        "--key",
        arg(&forged),
        "--date",
        "2026-11-21",
    ]);
    assert_eq!(o.code, 0, "{}", o.stderr);
    let trusted = scratch("sign-identity-trusted");
    std::fs::copy(keys.join("ada.key.pub"), trusted.join("ada.pub")).expect("copy");
    let o = verify(&run, Some(&trusted));
    assert_eq!(o.code, 3, "{}", o.stdout);
    assert!(
        o.stdout.contains("INVALID signature signatures/01-bo-chief.sig: it is signed as Bo Chief (chief physicist), but the trusted key file ada.pub records this key's holder as Ada Example (medical physicist)"),
        "{}",
        o.stdout
    );
    assert!(!o.stdout.contains("signed: Bo Chief"), "{}", o.stdout);
    // One key recorded for two holders is refused as a trusted folder.
    std::fs::write(
        trusted.join("other.pub"),
        std::fs::read_to_string(keys.join("ada.key.pub"))
            .expect("pub")
            .replace("Ada Example", "Someone Else"),
    )
    .expect("write");
    let o = verify(&run, Some(&trusted));
    assert_eq!(o.code, 2);
    assert!(
        o.stderr.contains("record one key for two holders"),
        "{}",
        o.stderr
    );
}

#[test]
fn signing_a_no_go_run_needs_the_verdict_typed_and_records_it() {
    let (run, o) = run_into_folder(&demo_copy("sign-no-go"), "lin-a");
    assert_eq!(o.code, 1, "lin-a is NO-GO: {}", o.stderr);
    let keys = scratch("sign-no-go-keys");
    let ada = keygen(&keys, "Ada Example", "medical physicist", "ada.key");
    let o = cli(&["sign", arg(&run), "--key", arg(&ada)]);
    assert_eq!(o.code, 2);
    assert!(
        o.stderr
            .contains("the run's verdict is NO-GO; signing it needs an explicit acknowledgement")
            && o.stderr.contains("--acknowledge-verdict \"NO-GO\""),
        "{}",
        o.stderr
    );
    let o = cli(&[
        "sign",
        arg(&run),
        "--key",
        arg(&ada),
        "--acknowledge-verdict",
        "GO",
    ]);
    assert_eq!(o.code, 2);
    assert!(
        o.stderr.contains("does not match the run's verdict NO-GO"),
        "{}",
        o.stderr
    );
    assert!(!run.join("signatures").exists());
    let o = cli(&[
        "sign",
        arg(&run),
        "--key",
        arg(&ada),
        "--date",
        "2026-11-21",
        "--acknowledge-verdict",
        "NO-GO",
        "--statement",
        "Reviewed; not for clinical use until the output is recalibrated.",
    ]);
    assert_eq!(o.code, 0, "{}", o.stderr);
    let o = verify(&run, None);
    assert_eq!(o.code, 0, "{}", o.stdout);
    assert!(o.stdout.contains("run verdict: NO-GO\n"), "{}", o.stdout);
    assert!(o.stdout.contains("; saw verdict NO-GO]"), "{}", o.stdout);
}

#[test]
fn control_characters_are_refused_at_signing_and_never_printed_raw() {
    let (run, _) = run_into_folder(&demo_copy("sign-control"), "lin-b");
    let keys = scratch("sign-control-keys");
    let ada = keygen(&keys, "Ada Example", "medical physicist", "ada.key");
    // An escape sequence that would clear a terminal, and a carriage return that would
    // overprint the line.
    for statement in ["Approved\u{1b}[2J", "Approved\rRejected"] {
        let o = cli(&[
            "sign",
            arg(&run),
            "--key",
            arg(&ada),
            "--statement",
            statement,
        ]);
        assert_eq!(o.code, 2, "{statement:?}");
        assert!(!o.stderr.contains('\u{1b}'), "{}", o.stderr);
    }
    let o = cli(&[
        "keygen",
        "--name",
        "A\u{7}B",
        "--role",
        "x",
        "--out",
        arg(&keys.join("bell.key")),
    ]);
    assert_eq!(o.code, 2);
    assert!(!run.join("signatures").exists());
}

#[test]
fn files_planted_in_a_run_folder_fail_verification_and_block_signing() {
    let (run, _) = run_into_folder(&demo_copy("sign-planted"), "lin-b");
    std::fs::write(run.join("inputs/data/extra.csv"), "planted\n").expect("plant");
    let o = verify(&run, None);
    assert_eq!(o.code, 3, "{}", o.stdout);
    assert!(
        o.stdout
            .contains("not covered by the manifest: inputs/data/extra.csv"),
        "{}",
        o.stdout
    );
    let keys = scratch("sign-planted-keys");
    let ada = keygen(&keys, "Ada Example", "medical physicist", "ada.key");
    let o = cli(&["sign", arg(&run), "--key", arg(&ada)]);
    assert_eq!(o.code, 2);
    assert!(
        o.stderr
            .contains("not covered by the manifest: inputs/data/extra.csv); it cannot be signed"),
        "{}",
        o.stderr
    );
    std::fs::remove_file(run.join("inputs/data/extra.csv")).expect("rm");
    // Only signature files may lie outside the manifest, and only under signatures/.
    std::fs::create_dir_all(run.join("signatures")).expect("mkdir");
    std::fs::write(run.join("signatures/readme.txt"), "not a signature\n").expect("plant");
    let o = verify(&run, None);
    assert_eq!(o.code, 3, "{}", o.stdout);
    assert!(
        o.stdout
            .contains("not covered by the manifest: signatures/readme.txt"),
        "{}",
        o.stdout
    );
    std::fs::remove_file(run.join("signatures/readme.txt")).expect("rm");
    assert_eq!(verify(&run, None).code, 0);
    // A listed file replaced by a symbolic link to identical bytes is not the file signed.
    #[cfg(unix)]
    {
        let results = run.join("results.json");
        let copy = run.with_file_name("results-copy.json");
        std::fs::copy(&results, &copy).expect("copy");
        std::fs::remove_file(&results).expect("rm");
        std::os::unix::fs::symlink(&copy, &results).expect("link");
        let o = verify(&run, None);
        assert_eq!(o.code, 3, "{}", o.stdout);
        assert!(
            o.stdout
                .contains("not a regular file: results.json (a symbolic link)"),
            "{}",
            o.stdout
        );
    }
}
