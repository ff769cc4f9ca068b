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
        "signed: Ada Example (medical physicist) on 2026-11-21: \"I have reviewed this commissioning run and its report.\" [signatures/01-ada-example.sig; valid; trusted key]\n"
    ), "{}", o.stdout);
    assert!(o.stdout.contains(
        "signed: Bo Chief (chief physicist) on 2026-11-22: \"Approved for clinical use.\" [signatures/02-bo-chief.sig; valid; UNKNOWN key (not in the trusted keys)]\n"
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
