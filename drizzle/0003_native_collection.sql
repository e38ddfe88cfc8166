CREATE TABLE `exporter_claims` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`tenant_id` integer NOT NULL,
	`collector_id` integer NOT NULL,
	`cidr` text NOT NULL,
	`first` blob NOT NULL,
	`last` blob NOT NULL,
	`prefix_length` integer NOT NULL,
	`domain_id` integer,
	`created_by` text NOT NULL,
	`created_at` integer NOT NULL,
	FOREIGN KEY (`tenant_id`) REFERENCES `tenants`(`id`) ON UPDATE no action ON DELETE cascade,
	FOREIGN KEY (`collector_id`) REFERENCES `collectors`(`id`) ON UPDATE no action ON DELETE cascade
);
--> statement-breakpoint
CREATE INDEX `exporter_claims_tenant_idx` ON `exporter_claims` (`tenant_id`);--> statement-breakpoint
CREATE INDEX `exporter_claims_first_idx` ON `exporter_claims` (`first`);--> statement-breakpoint
CREATE TABLE `exporters` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`address` text NOT NULL,
	`domain_id` integer NOT NULL,
	`transport` text NOT NULL,
	`first_seen_at` integer NOT NULL,
	`last_seen_at` integer NOT NULL,
	`messages` integer DEFAULT 0 NOT NULL,
	`records` integer DEFAULT 0 NOT NULL,
	`lost` integer DEFAULT 0 NOT NULL,
	`lost_unit` text DEFAULT 'records' NOT NULL,
	`waiting` integer DEFAULT 0 NOT NULL,
	`dropped_waiting` integer DEFAULT 0 NOT NULL,
	`malformed` integer DEFAULT 0 NOT NULL,
	`unusable` integer DEFAULT 0 NOT NULL,
	`unclaimed_messages` integer DEFAULT 0 NOT NULL,
	`records_per_second` real DEFAULT 0 NOT NULL,
	`sampling_interval` real,
	`templates` text DEFAULT '[]' NOT NULL,
	`enterprise_elements` text DEFAULT '[]' NOT NULL,
	`last_error` text
);
--> statement-breakpoint
CREATE UNIQUE INDEX `exporters_key_unique` ON `exporters` (`address`,`domain_id`,`transport`);--> statement-breakpoint
ALTER TABLE `ingest_batches` ADD `source` text DEFAULT 'json' NOT NULL;