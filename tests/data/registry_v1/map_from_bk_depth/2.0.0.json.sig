{
 "algorithm": "ed25519",
 "format": "refit-signature/1",
 "key_id": "f3cd99196cd10192",
 "signature": "IsYewKnsdDBgdDi+62LSEkbsAR/tKoC2n88oauups1BpSNMGAR4BcmyZwzTeiSldOcayghxqJRGgv8eb3tRyCQ==",
 "signed_file": "2.0.0.json"
}
