-- A small rigloop store written by store schema version 1 (two simulated subjects of the
-- tone_reversal example, invented), as `sqlite3 .dump` text; the migration test builds the
-- file from it and opens it with the current code.
BEGIN TRANSACTION;
CREATE TABLE decisions (
    subject      TEXT NOT NULL,
    session      TEXT NOT NULL,
    trial        INTEGER NOT NULL,           -- the trial whose event produced this decision
    next_trial   INTEGER NOT NULL,           -- Decision.trial
    cue          TEXT,
    block        TEXT NOT NULL,
    stage        TEXT NOT NULL,
    reward_armed INTEGER NOT NULL,
    end_session  INTEGER NOT NULL,
    decision     TEXT NOT NULL,              -- canonical JSON of Decision.to_dict()
    PRIMARY KEY (subject, session, trial),
    FOREIGN KEY (subject, session, trial) REFERENCES trials(subject, session, trial)
) WITHOUT ROWID;
INSERT INTO "decisions" VALUES('v1-m01','d01',1,2,'tone_lo','forward','acquisition',0,0,'{"block":"forward","cue":"tone_lo","difficulty":null,"end_session":false,"overrides":[],"reasons":["cue tone_lo: balanced mini-block of 4 (max run 3), 2 left","reward p = 0 for tone_lo: fixed by block ''forward''"],"reward_armed":false,"reward_prob":0.0,"reward_ul":0.0,"session":"d01","stage":"acquisition","subject":"v1-m01","trial":2,"valve_ms":null,"warnings":[]}');
INSERT INTO "decisions" VALUES('v1-m01','d01',2,3,'tone_hi','forward','acquisition',1,0,'{"block":"forward","cue":"tone_hi","difficulty":null,"end_session":false,"overrides":[],"reasons":["cue tone_hi: balanced mini-block of 4 (max run 3), 1 left","reward p = 1 for tone_hi: fixed by block ''forward''"],"reward_armed":true,"reward_prob":1.0,"reward_ul":4.0,"session":"d01","stage":"acquisition","subject":"v1-m01","trial":3,"valve_ms":null,"warnings":[]}');
INSERT INTO "decisions" VALUES('v1-m01','d01',3,4,'tone_lo','forward','acquisition',0,0,'{"block":"forward","cue":"tone_lo","difficulty":null,"end_session":false,"overrides":[],"reasons":["cue tone_lo: balanced mini-block of 4 (max run 3), 0 left","reward p = 0 for tone_lo: fixed by block ''forward''"],"reward_armed":false,"reward_prob":0.0,"reward_ul":0.0,"session":"d01","stage":"acquisition","subject":"v1-m01","trial":4,"valve_ms":null,"warnings":[]}');
INSERT INTO "decisions" VALUES('v1-m01','d01',4,5,'tone_lo','forward','acquisition',0,0,'{"block":"forward","cue":"tone_lo","difficulty":null,"end_session":false,"overrides":[],"reasons":["cue tone_lo: balanced mini-block of 4 (max run 3), 3 left","reward p = 0 for tone_lo: fixed by block ''forward''"],"reward_armed":false,"reward_prob":0.0,"reward_ul":0.0,"session":"d01","stage":"acquisition","subject":"v1-m01","trial":5,"valve_ms":null,"warnings":[]}');
INSERT INTO "decisions" VALUES('v1-m01','d01',5,6,'tone_hi','forward','acquisition',1,0,'{"block":"forward","cue":"tone_hi","difficulty":null,"end_session":false,"overrides":[],"reasons":["cue tone_hi: balanced mini-block of 4 (max run 3), 2 left","reward p = 1 for tone_hi: fixed by block ''forward''"],"reward_armed":true,"reward_prob":1.0,"reward_ul":4.0,"session":"d01","stage":"acquisition","subject":"v1-m01","trial":6,"valve_ms":null,"warnings":[]}');
INSERT INTO "decisions" VALUES('v1-m01','d01',6,7,'tone_hi','forward','acquisition',1,0,'{"block":"forward","cue":"tone_hi","difficulty":null,"end_session":false,"overrides":["welfare: 6 unrewarded trials in a row (limit 6) -> reward armed"],"reasons":["cue tone_hi: balanced mini-block of 4 (max run 3), 1 left","reward p = 1 for tone_hi: fixed by block ''forward''"],"reward_armed":true,"reward_prob":1.0,"reward_ul":4.0,"session":"d01","stage":"acquisition","subject":"v1-m01","trial":7,"valve_ms":null,"warnings":[]}');
INSERT INTO "decisions" VALUES('v1-m02','d01',1,2,'tone_lo','forward','acquisition',0,0,'{"block":"forward","cue":"tone_lo","difficulty":null,"end_session":false,"overrides":[],"reasons":["cue tone_lo: balanced mini-block of 4 (max run 3), 2 left","reward p = 0 for tone_lo: fixed by block ''forward''"],"reward_armed":false,"reward_prob":0.0,"reward_ul":0.0,"session":"d01","stage":"acquisition","subject":"v1-m02","trial":2,"valve_ms":null,"warnings":[]}');
INSERT INTO "decisions" VALUES('v1-m02','d01',2,3,'tone_hi','forward','acquisition',1,0,'{"block":"forward","cue":"tone_hi","difficulty":null,"end_session":false,"overrides":[],"reasons":["cue tone_hi: balanced mini-block of 4 (max run 3), 1 left","reward p = 1 for tone_hi: fixed by block ''forward''"],"reward_armed":true,"reward_prob":1.0,"reward_ul":4.0,"session":"d01","stage":"acquisition","subject":"v1-m02","trial":3,"valve_ms":null,"warnings":[]}');
INSERT INTO "decisions" VALUES('v1-m02','d01',3,4,'tone_hi','forward','acquisition',1,0,'{"block":"forward","cue":"tone_hi","difficulty":null,"end_session":false,"overrides":[],"reasons":["cue tone_hi: balanced mini-block of 4 (max run 3), 0 left","reward p = 1 for tone_hi: fixed by block ''forward''"],"reward_armed":true,"reward_prob":1.0,"reward_ul":4.0,"session":"d01","stage":"acquisition","subject":"v1-m02","trial":4,"valve_ms":null,"warnings":[]}');
INSERT INTO "decisions" VALUES('v1-m02','d01',4,5,'tone_hi','forward','acquisition',1,0,'{"block":"forward","cue":"tone_hi","difficulty":null,"end_session":false,"overrides":[],"reasons":["cue tone_hi: balanced mini-block of 4 (max run 3), 3 left","reward p = 1 for tone_hi: fixed by block ''forward''"],"reward_armed":true,"reward_prob":1.0,"reward_ul":4.0,"session":"d01","stage":"acquisition","subject":"v1-m02","trial":5,"valve_ms":null,"warnings":[]}');
CREATE TABLE quantities (
    subject     TEXT NOT NULL,
    session     TEXT NOT NULL,
    trial       INTEGER NOT NULL,
    data        TEXT NOT NULL,               -- canonical JSON object name -> float | null
    PRIMARY KEY (subject, session, trial),
    FOREIGN KEY (subject, session, trial) REFERENCES trials(subject, session, trial)
) WITHOUT ROWID;
INSERT INTO "quantities" VALUES('v1-m01','d01',1,'{"delta_cue":0.0,"delta_outcome":0.0,"p_correct":0.4878072367682054,"p_hi95":0.6372420159973461,"p_lo95":0.3405206117549322,"sd[tone_hi]":1.0,"surprise":0.0,"value[tone_hi]":0.0}');
INSERT INTO "quantities" VALUES('v1-m01','d01',2,'{"delta_cue":0.0,"delta_outcome":0.0,"p_correct":0.5060274689775497,"p_hi95":0.6821122629883742,"p_lo95":0.3284345561038919,"sd[tone_lo]":1.000499875062461,"surprise":0.0,"value[tone_lo]":0.0}');
INSERT INTO "quantities" VALUES('v1-m01','d01',3,'{"delta_cue":0.0,"delta_outcome":0.0,"p_correct":0.48282130524202804,"p_hi95":0.6837044267060555,"p_lo95":0.2873412344776664,"sd[tone_hi]":0.5110774264907563,"surprise":0.0,"value[tone_hi]":0.0}');
INSERT INTO "quantities" VALUES('v1-m01','d01',4,'{"delta_cue":0.0,"delta_outcome":0.0,"p_correct":0.5113383584773913,"p_hi95":0.7243171064090759,"p_lo95":0.2941618991641234,"sd[tone_lo]":0.5111567743976401,"surprise":0.0,"value[tone_lo]":0.0}');
INSERT INTO "quantities" VALUES('v1-m01','d01',5,'{"delta_cue":0.0,"delta_outcome":0.0,"p_correct":0.4789484775522511,"p_hi95":0.7114786638530537,"p_lo95":0.2551961957469774,"sd[tone_lo]":0.3941278332075931,"surprise":0.0,"value[tone_lo]":0.0}');
INSERT INTO "quantities" VALUES('v1-m01','d01',6,'{"delta_cue":0.0,"delta_outcome":0.0,"p_correct":0.4453623868188003,"p_hi95":0.6946636019173233,"p_lo95":0.22082469885453246,"sd[tone_hi]":0.39662049320175724,"surprise":0.0,"value[tone_hi]":0.0}');
INSERT INTO "quantities" VALUES('v1-m02','d01',1,'{"delta_cue":0.0,"delta_outcome":0.0,"p_correct":0.5121927632317946,"p_hi95":0.6594793882450678,"p_lo95":0.36275798400265385,"sd[tone_lo]":1.0,"surprise":0.0,"value[tone_lo]":0.0}');
INSERT INTO "quantities" VALUES('v1-m02','d01',2,'{"delta_cue":0.0,"delta_outcome":0.0,"p_correct":0.4939725310224503,"p_hi95":0.6715654438961081,"p_lo95":0.31788773701162587,"sd[tone_lo]":0.5100981629729854,"surprise":0.0,"value[tone_lo]":0.0}');
INSERT INTO "quantities" VALUES('v1-m02','d01',3,'{"delta_cue":0.0,"delta_outcome":0.0,"p_correct":0.4713423500893236,"p_hi95":0.6736795249341089,"p_lo95":0.27800335616231575,"sd[tone_hi]":1.0009995004993757,"surprise":0.0,"value[tone_hi]":0.0}');
INSERT INTO "quantities" VALUES('v1-m02','d01',4,'{"delta_cue":0.0,"delta_outcome":1.0,"p_correct":0.5004731418101778,"p_hi95":0.7155571969317114,"p_lo95":0.2852138391819343,"sd[tone_hi]":0.5102570445215259,"surprise":1.6971646002174599,"value[tone_hi]":0.0}');
CREATE TABLE sessions (
    id           INTEGER PRIMARY KEY,
    subject      TEXT NOT NULL REFERENCES subjects(name),
    session      TEXT NOT NULL,
    seq          INTEGER NOT NULL,           -- open order within the subject, from 1
    rig          TEXT NOT NULL,
    rules_name   TEXT NOT NULL,
    rules_text   TEXT NOT NULL,
    rules_sha256 TEXT NOT NULL,
    seed         INTEGER NOT NULL,
    opened_at    REAL NOT NULL,
    closed_at    REAL,
    profile      TEXT,
    meta         TEXT NOT NULL,              -- canonical JSON object
    UNIQUE (subject, session),
    UNIQUE (subject, seq)
);
INSERT INTO "sessions" VALUES(1,'v1-m01','d01',1,'sim-rig','tone_reversal','# Tone discrimination with serial reversals, head-fixed mice on a lick-spout rig.
# Invented scenario: the Brackenfield sensory-learning room, rig type "lickspout_hf".
# A 2 s tone (high or low) predicts a water drop at its end; the animal shows it has
# learned by licking in anticipation. When the model is confident that the rewarded
# tone''s value is high and the other''s is low, the contingency reverses.
name = "tone_reversal"
description = "Auditory go/no-go discrimination, then serial reversals on a posterior criterion"
reward_unit_ul = 4.0        # 4 µL counts as reward 1.0 for the learner

[learner]
model = "kalman_td"
gamma = 0.95
diffusion = 0.0005          # weights drift slowly, so a reversal can be tracked
noise = 0.2
prior_var = 1.0

[features]
kind = "serial_compound"    # one feature per (tone, 0.5 s step since onset)
dt = 0.5
n_bins = 4                  # the 2 s tone

[performance]
chance = 0.5
sigma2 = 0.05

[cues]
tone_hi = { role = "go_nogo", label = "12 kHz, 2 s" }
tone_lo = { role = "go_nogo", label = "4 kHz, 2 s" }

[stages.acquisition]
advance = { when = "p_value_above(tone_hi, 0.5) >= 0.95 and value(tone_lo) < 0.2 and trials_in_stage >= 60" }

[stages.acquisition.blocks.forward]
contingency.tone_hi = { p = 1.0, ul = 4.0 }
contingency.tone_lo = { p = 0.0, ul = 0.0 }
next_cue = { policy = "balanced", repeats = 2, max_run = 3 }

[stages.reversal]
new_session = "continue"

[stages.reversal.blocks.reversed]
contingency.tone_hi = { p = 0.0, ul = 0.0 }
contingency.tone_lo = { p = 1.0, ul = 4.0 }
next_cue = { policy = "balanced", repeats = 2, max_run = 3 }
end = { when = "p_value_above(tone_lo, 0.5) >= 0.95 and value(tone_hi) < 0.2", min_trials = 40, max_trials = 800, then = "forward" }

[stages.reversal.blocks.forward]
contingency.tone_hi = { p = 1.0, ul = 4.0 }
contingency.tone_lo = { p = 0.0, ul = 0.0 }
next_cue = { policy = "balanced", repeats = 2, max_run = 3 }
end = { when = "p_value_above(tone_hi, 0.5) >= 0.95 and value(tone_lo) < 0.2", min_trials = 40, max_trials = 800, then = "reversed" }

[session_end]
disengaged = "misses_in_row >= 15"
time_up = "session_min >= 45"
water_earned = "ul_today >= 1200"

[welfare]
max_unrewarded_run = 6      # stricter than the default 8
max_session_min = 50
','3d057334e09d8661f2aaf5b3b7c11b8bee6cbf8a509e635817fcafa793063a6b',3954903449480981479,1800000000.0,NULL,NULL,'{"first_decision":{"block":"forward","cue":"tone_hi","difficulty":null,"end_session":false,"overrides":[],"reasons":["cue tone_hi: balanced mini-block of 4 (max run 3), 3 left","reward p = 1 for tone_hi: fixed by block ''forward''"],"reward_armed":true,"reward_prob":1.0,"reward_ul":4.0,"session":"d01","stage":"acquisition","subject":"v1-m01","trial":1,"valve_ms":null,"warnings":[]}}');
INSERT INTO "sessions" VALUES(2,'v1-m02','d01',1,'sim-rig','tone_reversal','# Tone discrimination with serial reversals, head-fixed mice on a lick-spout rig.
# Invented scenario: the Brackenfield sensory-learning room, rig type "lickspout_hf".
# A 2 s tone (high or low) predicts a water drop at its end; the animal shows it has
# learned by licking in anticipation. When the model is confident that the rewarded
# tone''s value is high and the other''s is low, the contingency reverses.
name = "tone_reversal"
description = "Auditory go/no-go discrimination, then serial reversals on a posterior criterion"
reward_unit_ul = 4.0        # 4 µL counts as reward 1.0 for the learner

[learner]
model = "kalman_td"
gamma = 0.95
diffusion = 0.0005          # weights drift slowly, so a reversal can be tracked
noise = 0.2
prior_var = 1.0

[features]
kind = "serial_compound"    # one feature per (tone, 0.5 s step since onset)
dt = 0.5
n_bins = 4                  # the 2 s tone

[performance]
chance = 0.5
sigma2 = 0.05

[cues]
tone_hi = { role = "go_nogo", label = "12 kHz, 2 s" }
tone_lo = { role = "go_nogo", label = "4 kHz, 2 s" }

[stages.acquisition]
advance = { when = "p_value_above(tone_hi, 0.5) >= 0.95 and value(tone_lo) < 0.2 and trials_in_stage >= 60" }

[stages.acquisition.blocks.forward]
contingency.tone_hi = { p = 1.0, ul = 4.0 }
contingency.tone_lo = { p = 0.0, ul = 0.0 }
next_cue = { policy = "balanced", repeats = 2, max_run = 3 }

[stages.reversal]
new_session = "continue"

[stages.reversal.blocks.reversed]
contingency.tone_hi = { p = 0.0, ul = 0.0 }
contingency.tone_lo = { p = 1.0, ul = 4.0 }
next_cue = { policy = "balanced", repeats = 2, max_run = 3 }
end = { when = "p_value_above(tone_lo, 0.5) >= 0.95 and value(tone_hi) < 0.2", min_trials = 40, max_trials = 800, then = "forward" }

[stages.reversal.blocks.forward]
contingency.tone_hi = { p = 1.0, ul = 4.0 }
contingency.tone_lo = { p = 0.0, ul = 0.0 }
next_cue = { policy = "balanced", repeats = 2, max_run = 3 }
end = { when = "p_value_above(tone_hi, 0.5) >= 0.95 and value(tone_lo) < 0.2", min_trials = 40, max_trials = 800, then = "reversed" }

[session_end]
disengaged = "misses_in_row >= 15"
time_up = "session_min >= 45"
water_earned = "ul_today >= 1200"

[welfare]
max_unrewarded_run = 6      # stricter than the default 8
max_session_min = 50
','3d057334e09d8661f2aaf5b3b7c11b8bee6cbf8a509e635817fcafa793063a6b',3137103738342079582,1800003600.0,NULL,NULL,'{"first_decision":{"block":"forward","cue":"tone_lo","difficulty":null,"end_session":false,"overrides":[],"reasons":["cue tone_lo: balanced mini-block of 4 (max run 3), 3 left","reward p = 0 for tone_lo: fixed by block ''forward''"],"reward_armed":false,"reward_prob":0.0,"reward_ul":0.0,"session":"d01","stage":"acquisition","subject":"v1-m02","trial":1,"valve_ms":null,"warnings":[]}}');
CREATE TABLE snapshots (
    id          INTEGER PRIMARY KEY,
    subject     TEXT NOT NULL,
    session     TEXT NOT NULL,
    trial       INTEGER NOT NULL,           -- state after this trial (0: before the first)
    created     REAL NOT NULL,
    blob        BLOB NOT NULL,
    sha256      TEXT NOT NULL,
    UNIQUE (subject, session, trial),
    FOREIGN KEY (subject, session) REFERENCES sessions(subject, session)
);
INSERT INTO "snapshots" VALUES(1,'v1-m01','d01',3,1.79618125435303115848e+09,X'89A6666F726D617401A77375626A656374A676312D6D3031A76C6561726E657283A46E616D65A96B616C6D616E5F7464A36B6579D9776B616C6D616E5F746428646966667573696F6E3D302E303030352C67616D6D613D302E39352C6E6F6973653D302E322C7072696F725F7661723D312E30297C73657269616C5F636F6D706F756E643A64743D302E353A62696E733D343A64656361793D4E6F6E657C746F6E655F68692C746F6E655F6C6FA5737461746586A3636F7683A26E64A33C6638A57368617065920808A464617461C502008285776220E1C33FE4F2F42A84B1B23F000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000E4F2F42A84B1B23FCC46C965D7D0B53F000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000003E355EBA490CF03F000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000003E355EBA490CF03F000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000006D6BD1FBD4B8D03F7C0AA8CAA903BE3F0000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000007C0AA8CAA903BE3F986D2510A418C33F000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000003E355EBA490CF03F000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000003E355EBA490CF03FA9646966667573696F6ECB3F40624DD2F1A9FCA567616D6D61CB3FEE666666666666A56E6F697365CB3FC999999999999AA97072696F725F766172CB3FF0000000000000A17783A26E64A33C6638A573686170659108A464617461C44000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000A663757276657383A3616C6C86A66368616E6365CB3FE0000000000000A16E03A67369676D6132CB3FA999999999999AA3766172CB3FC77CF70F7911B2A476617230CB3FA999999999999AA178CBBFB19910A0E8072DA7746F6E655F686986A66368616E6365CB3FE0000000000000A16E02A67369676D6132CB3FA999999999999AA3766172CB3FC237DEFC944374A476617230CB3FA999999999999AA178CBBFBE42C470BE21ACA7746F6E655F6C6F86A66368616E6365CB3FE0000000000000A16E01A67369676D6132CB3FA999999999999AA3766172CB3FB8F9D94D1402D6A476617230CB3FA999999999999AA178CB3FA8F9C979BBFC04A87363686564756C65DE0024A57374616765AB6163717569736974696F6EA5626C6F636BA7666F7277617264A773657373696F6EA3643031AD73657373696F6E5F7374617274CB41DAD27480000000A96C6173745F77616C6CCB41DAD27484A00000A3646179AA323032372D30312D3135AD73657373696F6E5F656E646564C2AC747269616C735F746F74616C03B1747269616C735F696E5F73657373696F6E03AF747269616C735F696E5F737461676503AF747269616C735F696E5F626C6F636B03AF626C6F636B735F696E5F737461676500B173657373696F6E735F696E5F737461676501B0636F72726563745F696E5F626C6F636B01A46869747300A66D697373657302AC66616C73655F616C61726D7300B2636F72726563745F72656A656374696F6E7301AD6D69737365735F696E5F726F7702B1756E72657761726465645F696E5F726F7703AA756C5F73657373696F6ECB0000000000000000A8756C5F746F646179CB0000000000000000AB73746169725F6C6576656CC0B173746169725F636F72726563745F72756E00AF73746169725F77726F6E675F72756E00AE73746169725F6C6173745F64697200AF73746169725F726576657273616C7300A8737072745F6C6C72CB0000000000000000AC737072745F76657264696374A8636F6E74696E7565A5717565756590A86C6173745F637565A7746F6E655F6C6FA772756E5F6C656E01AA72696768745F62696173CB3FE0000000000000A96E5F63686F6963657300AA6C6173745F61726D6564C2A56E6F74657390A7636F6E7465787486A773657373696F6EA3643031A3726967A773696D2D726967A473656564CF36E2A3BBBB47EBE7AC72756C65735F736861323536D94033643035373333346530396438363631663261616635623362376331316238626565366362663861353039653633353831376663616661373933303633613662A576616C7665C0AE66697273745F6465636973696F6E8FA77375626A656374A676312D6D3031A773657373696F6EA3643031A5747269616C01A3637565A7746F6E655F6869AB7265776172645F70726F62CB3FF0000000000000A97265776172645F756CCB4010000000000000AC7265776172645F61726D6564C3A5626C6F636BA7666F7277617264A57374616765AB6163717569736974696F6EAB656E645F73657373696F6EC2AA646966666963756C7479C0A876616C76655F6D73C0A7726561736F6E7392D93963756520746F6E655F68693A2062616C616E636564206D696E692D626C6F636B206F66203420286D61782072756E2033292C2033206C656674D9327265776172642070203D203120666F7220746F6E655F68693A20666978656420627920626C6F636B2027666F727761726427A96F766572726964657390A87761726E696E677390AA6C6173745F747269616C03AC747269616C735F746F74616C03A56E6F74657390','7ad27a5db4545e909a28d972067678c2e0c226a6d82550c042ffce175e09b777');
INSERT INTO "snapshots" VALUES(2,'v1-m01','d01',6,1.79618125435588359833e+09,X'89A6666F726D617401A77375626A656374A676312D6D3031A76C6561726E657283A46E616D65A96B616C6D616E5F7464A36B6579D9776B616C6D616E5F746428646966667573696F6E3D302E303030352C67616D6D613D302E39352C6E6F6973653D302E322C7072696F725F7661723D312E30297C73657269616C5F636F6D706F756E643A64743D302E353A62696E733D343A64656361793D4E6F6E657C746F6E655F68692C746F6E655F6C6FA5737461746586A3636F7683A26E64A33C6638A57368617065920808A464617461C502006702BEED71AABC3FF6641CA23010AB3F000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000F6641CA23010AB3F3285FF633141AF3F000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000007C6ABC749318F03F000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000007C6ABC749318F03F00000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000A451A8B043ADBC3F8CBC7F980E09AB3F0000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000008CBC7F980E09AB3FE1CB7FBA1A4DAF3F000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000007C6ABC749318F03F000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000007C6ABC749318F03FA9646966667573696F6ECB3F40624DD2F1A9FCA567616D6D61CB3FEE666666666666A56E6F697365CB3FC999999999999AA97072696F725F766172CB3FF0000000000000A17783A26E64A33C6638A573686170659108A464617461C44000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000000A663757276657383A3616C6C86A66368616E6365CB3FE0000000000000A16E06A67369676D6132CB3FA999999999999AA3766172CB3FD211DC19FC7DFEA476617230CB3FA999999999999AA178CBBFCC162C22B8D1C5A7746F6E655F686986A66368616E6365CB3FE0000000000000A16E03A67369676D6132CB3FA999999999999AA3766172CB3FC78002EE264D18A476617230CB3FA999999999999AA178CBBFCA2F5367273A9FA7746F6E655F6C6F86A66368616E6365CB3FE0000000000000A16E03A67369676D6132CB3FA999999999999AA3766172CB3FC77D2CAA34078EA476617230CB3FA999999999999AA178CB3F9588EB816BB33AA87363686564756C65DE0024A57374616765AB6163717569736974696F6EA5626C6F636BA7666F7277617264A773657373696F6EA3643031AD73657373696F6E5F7374617274CB41DAD27480000000A96C6173745F77616C6CCB41DAD2748AA00000A3646179AA323032372D30312D3135AD73657373696F6E5F656E646564C2AC747269616C735F746F74616C06B1747269616C735F696E5F73657373696F6E06AF747269616C735F696E5F737461676506AF747269616C735F696E5F626C6F636B06AF626C6F636B735F696E5F737461676500B173657373696F6E735F696E5F737461676501B0636F72726563745F696E5F626C6F636B02A46869747300A66D697373657303AC66616C73655F616C61726D7301B2636F72726563745F72656A656374696F6E7302AD6D69737365735F696E5F726F7701B1756E72657761726465645F696E5F726F7706AA756C5F73657373696F6ECB0000000000000000A8756C5F746F646179CB0000000000000000AB73746169725F6C6576656CC0B173746169725F636F72726563745F72756E00AF73746169725F77726F6E675F72756E00AE73746169725F6C6173745F64697200AF73746169725F726576657273616C7300A8737072745F6C6C72CB0000000000000000AC737072745F76657264696374A8636F6E74696E7565A5717565756591A7746F6E655F6C6FA86C6173745F637565A7746F6E655F6869A772756E5F6C656E02AA72696768745F62696173CB3FE0000000000000A96E5F63686F6963657300AA6C6173745F61726D6564C3A56E6F74657390A7636F6E7465787486A773657373696F6EA3643031A3726967A773696D2D726967A473656564CF36E2A3BBBB47EBE7AC72756C65735F736861323536D94033643035373333346530396438363631663261616635623362376331316238626565366362663861353039653633353831376663616661373933303633613662A576616C7665C0AE66697273745F6465636973696F6E8FA77375626A656374A676312D6D3031A773657373696F6EA3643031A5747269616C01A3637565A7746F6E655F6869AB7265776172645F70726F62CB3FF0000000000000A97265776172645F756CCB4010000000000000AC7265776172645F61726D6564C3A5626C6F636BA7666F7277617264A57374616765AB6163717569736974696F6EAB656E645F73657373696F6EC2AA646966666963756C7479C0A876616C76655F6D73C0A7726561736F6E7392D93963756520746F6E655F68693A2062616C616E636564206D696E692D626C6F636B206F66203420286D61782072756E2033292C2033206C656674D9327265776172642070203D203120666F7220746F6E655F68693A20666978656420627920626C6F636B2027666F727761726427A96F766572726964657390A87761726E696E677390AA6C6173745F747269616C06AC747269616C735F746F74616C06A56E6F74657390','9594b57984d1c6f9d6f6e1e6b5ef2fe4208b351459f8904853707e1025ba70e9');
CREATE TABLE subjects (
    name        TEXT PRIMARY KEY,
    first_seen  REAL NOT NULL,
    ord         INTEGER NOT NULL UNIQUE
);
INSERT INTO "subjects" VALUES('v1-m01',1800000000.0,1);
INSERT INTO "subjects" VALUES('v1-m02',1800003600.0,2);
CREATE TABLE trials (
    subject     TEXT NOT NULL,
    session     TEXT NOT NULL,
    trial       INTEGER NOT NULL,
    rig         TEXT NOT NULL,
    wall_time   REAL NOT NULL,
    first_cue   TEXT,
    reward_ul   REAL NOT NULL,
    result      TEXT,
    event       TEXT NOT NULL,               -- canonical JSON of TrialEvent.to_dict()
    PRIMARY KEY (subject, session, trial),
    FOREIGN KEY (subject, session) REFERENCES sessions(subject, session)
) WITHOUT ROWID;
INSERT INTO "trials" VALUES('v1-m01','d01',1,'sim-rig',1800000000.0,'tone_hi',0.0,'incorrect','{"cues":[["tone_hi",0.5,1.5]],"duration":2.5,"extra":{},"outcome":{"punishment":null,"punishment_time":null,"reward_time":null,"reward_ul":0.0,"timeout_s":0.0},"response":{"kind":"licks","latency":null,"result":"incorrect","value":0.0},"rig":"sim-rig","session":"d01","subject":"v1-m01","trial":1,"wall_time":1800000000.0}');
INSERT INTO "trials" VALUES('v1-m01','d01',2,'sim-rig',1800000008.0,'tone_lo',0.0,'correct','{"cues":[["tone_lo",0.5,1.5]],"duration":2.5,"extra":{},"outcome":{"punishment":null,"punishment_time":null,"reward_time":null,"reward_ul":0.0,"timeout_s":0.0},"response":{"kind":"licks","latency":null,"result":"correct","value":0.0},"rig":"sim-rig","session":"d01","subject":"v1-m01","trial":2,"wall_time":1800000008.0}');
INSERT INTO "trials" VALUES('v1-m01','d01',3,'sim-rig',1800000016.0,'tone_hi',0.0,'incorrect','{"cues":[["tone_hi",0.5,1.5]],"duration":2.5,"extra":{},"outcome":{"punishment":null,"punishment_time":null,"reward_time":null,"reward_ul":0.0,"timeout_s":0.0},"response":{"kind":"licks","latency":null,"result":"incorrect","value":0.0},"rig":"sim-rig","session":"d01","subject":"v1-m01","trial":3,"wall_time":1800000016.0}');
INSERT INTO "trials" VALUES('v1-m01','d01',4,'sim-rig',1800000024.0,'tone_lo',0.0,'correct','{"cues":[["tone_lo",0.5,1.5]],"duration":2.5,"extra":{},"outcome":{"punishment":null,"punishment_time":null,"reward_time":null,"reward_ul":0.0,"timeout_s":0.0},"response":{"kind":"licks","latency":null,"result":"correct","value":0.0},"rig":"sim-rig","session":"d01","subject":"v1-m01","trial":4,"wall_time":1800000024.0}');
INSERT INTO "trials" VALUES('v1-m01','d01',5,'sim-rig',1800000032.0,'tone_lo',0.0,'incorrect','{"cues":[["tone_lo",0.5,1.5]],"duration":2.5,"extra":{},"outcome":{"punishment":null,"punishment_time":null,"reward_time":null,"reward_ul":0.0,"timeout_s":0.0},"response":{"kind":"licks","latency":0.8544192808766115,"result":"incorrect","value":1.0},"rig":"sim-rig","session":"d01","subject":"v1-m01","trial":5,"wall_time":1800000032.0}');
INSERT INTO "trials" VALUES('v1-m01','d01',6,'sim-rig',1800000040.0,'tone_hi',0.0,'incorrect','{"cues":[["tone_hi",0.5,1.5]],"duration":2.5,"extra":{},"outcome":{"punishment":null,"punishment_time":null,"reward_time":null,"reward_ul":0.0,"timeout_s":0.0},"response":{"kind":"licks","latency":null,"result":"incorrect","value":0.0},"rig":"sim-rig","session":"d01","subject":"v1-m01","trial":6,"wall_time":1800000040.0}');
INSERT INTO "trials" VALUES('v1-m02','d01',1,'sim-rig',1800003600.0,'tone_lo',0.0,'correct','{"cues":[["tone_lo",0.5,1.5]],"duration":2.5,"extra":{},"outcome":{"punishment":null,"punishment_time":null,"reward_time":null,"reward_ul":0.0,"timeout_s":0.0},"response":{"kind":"licks","latency":null,"result":"correct","value":0.0},"rig":"sim-rig","session":"d01","subject":"v1-m02","trial":1,"wall_time":1800003600.0}');
INSERT INTO "trials" VALUES('v1-m02','d01',2,'sim-rig',1800003608.0,'tone_lo',0.0,'incorrect','{"cues":[["tone_lo",0.5,1.5]],"duration":2.5,"extra":{},"outcome":{"punishment":null,"punishment_time":null,"reward_time":null,"reward_ul":0.0,"timeout_s":0.0},"response":{"kind":"licks","latency":0.7008084853559062,"result":"incorrect","value":1.0},"rig":"sim-rig","session":"d01","subject":"v1-m02","trial":2,"wall_time":1800003608.0}');
INSERT INTO "trials" VALUES('v1-m02','d01',3,'sim-rig',1800003616.0,'tone_hi',0.0,'incorrect','{"cues":[["tone_hi",0.5,1.5]],"duration":2.5,"extra":{},"outcome":{"punishment":null,"punishment_time":null,"reward_time":null,"reward_ul":0.0,"timeout_s":0.0},"response":{"kind":"licks","latency":null,"result":"incorrect","value":0.0},"rig":"sim-rig","session":"d01","subject":"v1-m02","trial":3,"wall_time":1800003616.0}');
INSERT INTO "trials" VALUES('v1-m02','d01',4,'sim-rig',1800003624.0,'tone_hi',4.0,'correct','{"cues":[["tone_hi",0.5,1.5]],"duration":2.5,"extra":{},"outcome":{"punishment":null,"punishment_time":null,"reward_time":1.5,"reward_ul":4.0,"timeout_s":0.0},"response":{"kind":"licks","latency":0.8569724825805953,"result":"correct","value":1.0},"rig":"sim-rig","session":"d01","subject":"v1-m02","trial":4,"wall_time":1800003624.0}');
COMMIT;
PRAGMA application_id = 1380404304;
PRAGMA user_version = 1;
