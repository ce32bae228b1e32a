-- 0005: the audit trail states every password and token hash (as the
-- SHA-256 of the stored hash), so that `audit verify` names one edited
-- behind lotwatch's back. No table changes: upgradeCredentials appends,
-- for a database that has an audit trail, one entry per user and token
-- stating the hash it has now; later entries state each new one.
SELECT 1;
