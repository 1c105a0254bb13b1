//! API tokens.

use super::*;

on_both_backends!(tokens_are_stored_hashed_and_verify_by_role_and_plant);

async fn tokens_are_stored_hashed_and_verify_by_role_and_plant(db: Scratch) {
    let store = &db.store;
    let ingest = store
        .create_token(Role::Ingest, Some("west"))
        .await
        .unwrap();
    let admin = store.create_token(Role::Admin, None).await.unwrap();
    assert_ne!(ingest.token, admin.token);

    let grant = store.verify_token(&ingest.token).await.unwrap().unwrap();
    assert_eq!(grant.role, Role::Ingest);
    assert!(grant.permits(Role::Ingest, "west"));
    assert!(!grant.permits(Role::Ingest, "east"));
    assert!(!grant.permits(Role::Read, "west"));
    let grant = store.verify_token(&admin.token).await.unwrap().unwrap();
    assert!(grant.permits(Role::Maintain, "east"));
    assert!(store.verify_token("lb_nonsense").await.unwrap().is_none());

    assert!(store.revoke_token(ingest.id).await.unwrap());
    assert!(store.verify_token(&ingest.token).await.unwrap().is_none());

    // Neither the database nor its write-ahead log holds a plaintext token; in PostgreSQL,
    // whose files are out of reach, no column of any token's row does.
    match (store, &db._place) {
        (Store::Sqlite(_), Place::Folder(dir)) => {
            store.close().await;
            for entry in std::fs::read_dir(dir.path()).unwrap() {
                let bytes = std::fs::read(entry.unwrap().path()).unwrap();
                for token in [&ingest.token, &admin.token] {
                    let secret = token.as_bytes();
                    assert!(!bytes.windows(secret.len()).any(|w| w == secret));
                }
            }
        }
        (Store::Postgres(s), _) => {
            let rows: Vec<String> = sqlx::query_scalar("SELECT t::text FROM api_tokens AS t")
                .fetch_all(&s.pool)
                .await
                .unwrap();
            assert_eq!(rows.len(), 2);
            for row in rows {
                for token in [&ingest.token, &admin.token] {
                    assert!(!row.contains(token.as_str()), "{row}");
                    assert!(!row.contains(&token[3..]), "{row}");
                }
            }
        }
        _ => unreachable!("a SQLite store lives in a folder"),
    }
}
