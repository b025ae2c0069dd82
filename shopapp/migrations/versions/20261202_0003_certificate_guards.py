"""certificate guards: no replace/truncate of certificates, void columns only by voiding, certified evidence frozen

Revision ID: 0003
Revises: 0002
Create Date: 2026-12-02

Issued certificates were alterable around the application:

- SQLite: ``INSERT OR REPLACE`` deletes a colliding certificate without firing its
  DELETE trigger; ``certificate_no_replace`` refuses any insert that collides with an
  existing certificate (and shopapp turns ``recursive_triggers`` on at connect).
- PostgreSQL: ``TRUNCATE certificate``; refused by ``certificate_no_truncate``.
- Both: an issued certificate's id and its void columns could be written without
  voiding it; ``certificate_immutable`` now allows only the issued -> void transition,
  touching only state, voided_at, voided_by_id and void_reason.
- Both: the evidence of a job with a valid certificate (runs, run readings,
  corrections) could be updated or deleted; refused now (and TRUNCATE of those tables
  on PostgreSQL while any certificate is valid).

The SQL is frozen here; shopapp/models/certificates.py carries the same statements for
``create_all``, and tests/test_schema.py compares the two.
"""

from __future__ import annotations

from collections.abc import Sequence

from alembic import op

revision: str = "0003"
down_revision: str | None = "0002"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

SQLITE_CERTIFICATE_TRIGGERS = (
    "CREATE TRIGGER certificate_immutable BEFORE UPDATE ON certificate WHEN OLD.state = 'void' OR NEW.id IS NOT OLD.id OR NEW.number IS NOT OLD.number OR NEW.revision IS NOT OLD.revision OR NEW.job_id IS NOT OLD.job_id OR NEW.issued_by_id IS NOT OLD.issued_by_id OR NEW.issued_at IS NOT OLD.issued_at OR NEW.reason IS NOT OLD.reason OR NEW.pdf IS NOT OLD.pdf OR NEW.pdf_sha256 IS NOT OLD.pdf_sha256 OR NEW.data_json IS NOT OLD.data_json OR NEW.data_sha256 IS NOT OLD.data_sha256 OR (NEW.state = 'issued' AND (NEW.voided_at IS NOT OLD.voided_at OR NEW.voided_by_id IS NOT OLD.voided_by_id OR NEW.void_reason IS NOT OLD.void_reason)) BEGIN SELECT RAISE(ABORT, 'certificate is immutable: an issued certificate changes only by being voided, a void one never; reissue a new revision instead'); END",
    "CREATE TRIGGER certificate_no_replace BEFORE INSERT ON certificate WHEN EXISTS (SELECT 1 FROM certificate WHERE id = NEW.id OR (number = NEW.number AND revision = NEW.revision) OR pdf_sha256 = NEW.pdf_sha256) BEGIN SELECT RAISE(ABORT, 'certificates are never replaced: one with this id, number and revision or PDF exists already'); END",
)
SQLITE_EVIDENCE_TRIGGERS = (
    "CREATE TRIGGER run_certified_update BEFORE UPDATE ON run WHEN EXISTS (SELECT 1 FROM certificate WHERE state = 'issued' AND job_id IN (OLD.job_id, NEW.job_id)) BEGIN SELECT RAISE(ABORT, 'evidence of a certified job is immutable: reopen the job (which voids its certificate) before changing its runs, readings or corrections'); END",
    "CREATE TRIGGER run_certified_delete BEFORE DELETE ON run WHEN EXISTS (SELECT 1 FROM certificate WHERE state = 'issued' AND job_id IN (OLD.job_id)) BEGIN SELECT RAISE(ABORT, 'evidence of a certified job is immutable: reopen the job (which voids its certificate) before changing its runs, readings or corrections'); END",
    "CREATE TRIGGER run_reading_certified_update BEFORE UPDATE ON run_reading WHEN EXISTS (SELECT 1 FROM run JOIN certificate ON certificate.job_id = run.job_id WHERE certificate.state = 'issued' AND run.id IN (OLD.run_id, NEW.run_id)) BEGIN SELECT RAISE(ABORT, 'evidence of a certified job is immutable: reopen the job (which voids its certificate) before changing its runs, readings or corrections'); END",
    "CREATE TRIGGER run_reading_certified_delete BEFORE DELETE ON run_reading WHEN EXISTS (SELECT 1 FROM run JOIN certificate ON certificate.job_id = run.job_id WHERE certificate.state = 'issued' AND run.id IN (OLD.run_id)) BEGIN SELECT RAISE(ABORT, 'evidence of a certified job is immutable: reopen the job (which voids its certificate) before changing its runs, readings or corrections'); END",
    "CREATE TRIGGER correction_certified_update BEFORE UPDATE ON correction WHEN EXISTS (SELECT 1 FROM certificate WHERE state = 'issued' AND job_id IN (OLD.job_id, NEW.job_id)) BEGIN SELECT RAISE(ABORT, 'evidence of a certified job is immutable: reopen the job (which voids its certificate) before changing its runs, readings or corrections'); END",
    "CREATE TRIGGER correction_certified_delete BEFORE DELETE ON correction WHEN EXISTS (SELECT 1 FROM certificate WHERE state = 'issued' AND job_id IN (OLD.job_id)) BEGIN SELECT RAISE(ABORT, 'evidence of a certified job is immutable: reopen the job (which voids its certificate) before changing its runs, readings or corrections'); END",
)
POSTGRES_TRIGGERS = (
    "CREATE OR REPLACE FUNCTION certificate_guard() RETURNS trigger AS $$ BEGIN IF TG_OP = 'DELETE' THEN RAISE EXCEPTION 'certificates are never deleted' USING ERRCODE = 'integrity_constraint_violation'; END IF; IF OLD.state = 'void' OR NEW.id IS DISTINCT FROM OLD.id OR NEW.number IS DISTINCT FROM OLD.number OR NEW.revision IS DISTINCT FROM OLD.revision OR NEW.job_id IS DISTINCT FROM OLD.job_id OR NEW.issued_by_id IS DISTINCT FROM OLD.issued_by_id OR NEW.issued_at IS DISTINCT FROM OLD.issued_at OR NEW.reason IS DISTINCT FROM OLD.reason OR NEW.pdf IS DISTINCT FROM OLD.pdf OR NEW.pdf_sha256 IS DISTINCT FROM OLD.pdf_sha256 OR NEW.data_json IS DISTINCT FROM OLD.data_json OR NEW.data_sha256 IS DISTINCT FROM OLD.data_sha256 OR (NEW.state = 'issued' AND (NEW.voided_at IS DISTINCT FROM OLD.voided_at OR NEW.voided_by_id IS DISTINCT FROM OLD.voided_by_id OR NEW.void_reason IS DISTINCT FROM OLD.void_reason)) THEN RAISE EXCEPTION 'certificate is immutable: an issued certificate changes only by being voided, a void one never; reissue a new revision instead' USING ERRCODE = 'integrity_constraint_violation'; END IF; RETURN NEW; END; $$ LANGUAGE plpgsql",
    "CREATE OR REPLACE FUNCTION certificate_no_truncate() RETURNS trigger AS $$ BEGIN RAISE EXCEPTION 'certificates are never deleted: TRUNCATE certificate is refused' USING ERRCODE = 'integrity_constraint_violation'; END; $$ LANGUAGE plpgsql",
    "CREATE TRIGGER certificate_no_truncate BEFORE TRUNCATE ON certificate FOR EACH STATEMENT EXECUTE FUNCTION certificate_no_truncate()",
    "CREATE OR REPLACE FUNCTION certified_evidence_guard() RETURNS trigger AS $$ DECLARE job_ids integer[]; cert text; BEGIN IF TG_TABLE_NAME = 'run_reading' THEN IF TG_OP = 'UPDATE' THEN SELECT array_agg(job_id) INTO job_ids FROM run WHERE id IN (OLD.run_id, NEW.run_id); ELSE SELECT array_agg(job_id) INTO job_ids FROM run WHERE id = OLD.run_id; END IF; ELSIF TG_OP = 'UPDATE' THEN job_ids := ARRAY[OLD.job_id, NEW.job_id]; ELSE job_ids := ARRAY[OLD.job_id]; END IF; SELECT number || ' revision ' || revision INTO cert FROM certificate WHERE state = 'issued' AND job_id = ANY(job_ids) LIMIT 1; IF cert IS NOT NULL THEN RAISE EXCEPTION 'evidence of a certified job is immutable: reopen the job (which voids its certificate) before changing its runs, readings or corrections (% of a job with valid certificate %)', TG_TABLE_NAME, cert USING ERRCODE = 'integrity_constraint_violation'; END IF; IF TG_OP = 'DELETE' THEN RETURN OLD; END IF; RETURN NEW; END; $$ LANGUAGE plpgsql",
    "CREATE OR REPLACE FUNCTION certified_evidence_no_truncate() RETURNS trigger AS $$ BEGIN IF EXISTS (SELECT 1 FROM certificate WHERE state = 'issued') THEN RAISE EXCEPTION 'evidence of a certified job is immutable: reopen the job (which voids its certificate) before changing its runs, readings or corrections (TRUNCATE % while certificates are valid)', TG_TABLE_NAME USING ERRCODE = 'integrity_constraint_violation'; END IF; RETURN NULL; END; $$ LANGUAGE plpgsql",
    "CREATE TRIGGER run_certified_guard BEFORE UPDATE OR DELETE ON run FOR EACH ROW EXECUTE FUNCTION certified_evidence_guard()",
    "CREATE TRIGGER run_certified_no_truncate BEFORE TRUNCATE ON run FOR EACH STATEMENT EXECUTE FUNCTION certified_evidence_no_truncate()",
    "CREATE TRIGGER run_reading_certified_guard BEFORE UPDATE OR DELETE ON run_reading FOR EACH ROW EXECUTE FUNCTION certified_evidence_guard()",
    "CREATE TRIGGER run_reading_certified_no_truncate BEFORE TRUNCATE ON run_reading FOR EACH STATEMENT EXECUTE FUNCTION certified_evidence_no_truncate()",
    "CREATE TRIGGER correction_certified_guard BEFORE UPDATE OR DELETE ON correction FOR EACH ROW EXECUTE FUNCTION certified_evidence_guard()",
    "CREATE TRIGGER correction_certified_no_truncate BEFORE TRUNCATE ON correction FOR EACH STATEMENT EXECUTE FUNCTION certified_evidence_no_truncate()",
)

# 0001's statements, put back by the downgrade.
SQLITE_0001_IMMUTABLE = "CREATE TRIGGER certificate_immutable BEFORE UPDATE ON certificate WHEN OLD.state = 'void' OR NEW.number IS NOT OLD.number OR NEW.revision IS NOT OLD.revision OR NEW.job_id IS NOT OLD.job_id OR NEW.issued_by_id IS NOT OLD.issued_by_id OR NEW.issued_at IS NOT OLD.issued_at OR NEW.reason IS NOT OLD.reason OR NEW.pdf IS NOT OLD.pdf OR NEW.pdf_sha256 IS NOT OLD.pdf_sha256 OR NEW.data_json IS NOT OLD.data_json OR NEW.data_sha256 IS NOT OLD.data_sha256 BEGIN SELECT RAISE(ABORT, 'certificate is immutable: issued certificates never change; reissue a new revision instead'); END"
POSTGRES_0001_GUARD = "CREATE OR REPLACE FUNCTION certificate_guard() RETURNS trigger AS $$ BEGIN IF TG_OP = 'DELETE' THEN RAISE EXCEPTION 'certificates are never deleted'; END IF; IF OLD.state = 'void' OR NEW.number IS DISTINCT FROM OLD.number OR NEW.revision IS DISTINCT FROM OLD.revision OR NEW.job_id IS DISTINCT FROM OLD.job_id OR NEW.issued_by_id IS DISTINCT FROM OLD.issued_by_id OR NEW.issued_at IS DISTINCT FROM OLD.issued_at OR NEW.reason IS DISTINCT FROM OLD.reason OR NEW.pdf IS DISTINCT FROM OLD.pdf OR NEW.pdf_sha256 IS DISTINCT FROM OLD.pdf_sha256 OR NEW.data_json IS DISTINCT FROM OLD.data_json OR NEW.data_sha256 IS DISTINCT FROM OLD.data_sha256 THEN RAISE EXCEPTION 'certificate is immutable: issued certificates never change; reissue a new revision instead'; END IF; RETURN NEW; END; $$ LANGUAGE plpgsql"

SQLITE_NEW_TRIGGERS = (
    "certificate_no_replace",
    "run_certified_update", "run_certified_delete",
    "run_reading_certified_update", "run_reading_certified_delete",
    "correction_certified_update", "correction_certified_delete",
)
POSTGRES_NEW_TRIGGERS = (
    ("certificate_no_truncate", "certificate"),
    ("run_certified_guard", "run"), ("run_certified_no_truncate", "run"),
    ("run_reading_certified_guard", "run_reading"),
    ("run_reading_certified_no_truncate", "run_reading"),
    ("correction_certified_guard", "correction"),
    ("correction_certified_no_truncate", "correction"),
)
POSTGRES_NEW_FUNCTIONS = (
    "certificate_no_truncate", "certified_evidence_guard", "certified_evidence_no_truncate",
)


def upgrade() -> None:
    dialect = op.get_bind().dialect.name
    if dialect == "sqlite":
        op.execute("DROP TRIGGER IF EXISTS certificate_immutable")
        for sql in (*SQLITE_CERTIFICATE_TRIGGERS, *SQLITE_EVIDENCE_TRIGGERS):
            op.execute(sql)
    elif dialect == "postgresql":
        # certificate_guard() is replaced in place; its trigger stays as 0001 made it.
        for sql in POSTGRES_TRIGGERS:
            op.execute(sql)


def downgrade() -> None:
    dialect = op.get_bind().dialect.name
    if dialect == "sqlite":
        for name in ("certificate_immutable", *SQLITE_NEW_TRIGGERS):
            op.execute(f"DROP TRIGGER IF EXISTS {name}")
        op.execute(SQLITE_0001_IMMUTABLE)
    elif dialect == "postgresql":
        for name, table in POSTGRES_NEW_TRIGGERS:
            op.execute(f"DROP TRIGGER IF EXISTS {name} ON {table}")
        for name in POSTGRES_NEW_FUNCTIONS:
            op.execute(f"DROP FUNCTION IF EXISTS {name}()")
        op.execute(POSTGRES_0001_GUARD)
