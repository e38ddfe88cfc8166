CREATE TABLE `merges` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`tenant_id` integer NOT NULL,
	`collector_id` integer NOT NULL,
	`inputs` text NOT NULL,
	`from_ms` integer NOT NULL,
	`to_ms` integer NOT NULL,
	`sample_size` integer NOT NULL,
	`coordinated` integer NOT NULL,
	`windows` integer NOT NULL,
	`kept` integer NOT NULL,
	`duplicates_dropped` integer DEFAULT 0 NOT NULL,
	`created_by` text NOT NULL,
	`created_at` integer NOT NULL,
	FOREIGN KEY (`tenant_id`) REFERENCES `tenants`(`id`) ON UPDATE no action ON DELETE cascade,
	FOREIGN KEY (`collector_id`) REFERENCES `collectors`(`id`) ON UPDATE no action ON DELETE cascade
);
--> statement-breakpoint
CREATE UNIQUE INDEX `merges_collector_id_unique` ON `merges` (`collector_id`);--> statement-breakpoint
CREATE INDEX `merges_tenant_idx` ON `merges` (`tenant_id`,`created_at`);--> statement-breakpoint
-- Hand-written below: drizzle-kit would rebuild collectors and tenants (DROP TABLE tenants
-- cascades to every row that references it), where adding columns is enough.
ALTER TABLE `collectors` ADD `kind` text DEFAULT 'stream' NOT NULL CONSTRAINT "collectors_kind_check" CHECK ("kind" in ('stream', 'merge'));--> statement-breakpoint
ALTER TABLE `tenants` ADD `hourly_retention_days` integer DEFAULT 365 NOT NULL;--> statement-breakpoint
UPDATE `tenants` SET `hourly_retention_days` = `retention_days` WHERE `retention_days` > `hourly_retention_days`;--> statement-breakpoint
ALTER TABLE `tenants` ADD `coordinated` integer DEFAULT false NOT NULL;--> statement-breakpoint
ALTER TABLE `tenants` ADD `coordination_secret` text;--> statement-breakpoint
-- The version check of an ingest batch: inserting (id, next_seq) here aborts the whole
-- transaction unless the reservoir still exists at that version, i.e. nothing else (a
-- roll-up, an import, another process) rewrote it since this node loaded it.
CREATE VIEW `reservoir_expectations` AS SELECT `id`, `next_seq` FROM `reservoirs` WHERE 0;--> statement-breakpoint
CREATE TRIGGER `reservoir_expectations_check` INSTEAD OF INSERT ON `reservoir_expectations`
WHEN NOT EXISTS (SELECT 1 FROM `reservoirs` WHERE `id` = NEW.`id` AND `next_seq` = NEW.`next_seq`)
BEGIN SELECT raise(ABORT, 'weir_reservoir_changed'); END;
