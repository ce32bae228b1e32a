-- 0011: e-mail rules that send the day's messages as one digest.
-- alert_rules.digest: '' to send each message when it is made; otherwise
-- the time of day, HH:MM in the process's time zone, when the messages
-- made since the last digest go out together as one e-mail.
ALTER TABLE alert_rules ADD COLUMN digest TEXT NOT NULL DEFAULT '';
