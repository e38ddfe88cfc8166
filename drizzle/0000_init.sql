CREATE TABLE `api_keys` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`tenant_id` integer NOT NULL,
	`collector_id` integer NOT NULL,
	`prefix` text NOT NULL,
	`hash` text NOT NULL,
	`scopes` text NOT NULL,
	`created_at` integer NOT NULL,
	`created_by` text,
	`last_used_at` integer,
	`revoked_at` integer,
	FOREIGN KEY (`tenant_id`) REFERENCES `tenants`(`id`) ON UPDATE no action ON DELETE cascade,
	FOREIGN KEY (`collector_id`) REFERENCES `collectors`(`id`) ON UPDATE no action ON DELETE cascade,
	CONSTRAINT "api_keys_scopes_check" CHECK("api_keys"."scopes" in ('ingest', 'query', 'ingest,query'))
);
--> statement-breakpoint
CREATE UNIQUE INDEX `api_keys_prefix_unique` ON `api_keys` (`prefix`);--> statement-breakpoint
CREATE UNIQUE INDEX `api_keys_hash_unique` ON `api_keys` (`hash`);--> statement-breakpoint
CREATE TABLE `collectors` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`tenant_id` integer NOT NULL,
	`name` text NOT NULL,
	`created_at` integer NOT NULL,
	`last_seen_at` integer,
	FOREIGN KEY (`tenant_id`) REFERENCES `tenants`(`id`) ON UPDATE no action ON DELETE cascade
);
--> statement-breakpoint
CREATE UNIQUE INDEX `collectors_tenant_name_unique` ON `collectors` (`tenant_id`,`name`);--> statement-breakpoint
CREATE TABLE `ingest_batches` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`tenant_id` integer NOT NULL,
	`collector_id` integer NOT NULL,
	`idempotency_key` text,
	`received_at` integer NOT NULL,
	`record_count` integer NOT NULL,
	`bytes` text NOT NULL,
	`response` text NOT NULL,
	FOREIGN KEY (`tenant_id`) REFERENCES `tenants`(`id`) ON UPDATE no action ON DELETE cascade,
	FOREIGN KEY (`collector_id`) REFERENCES `collectors`(`id`) ON UPDATE no action ON DELETE cascade
);
--> statement-breakpoint
CREATE INDEX `ingest_batches_tenant_received_idx` ON `ingest_batches` (`tenant_id`,`received_at`);--> statement-breakpoint
CREATE UNIQUE INDEX `ingest_batches_idempotency_unique` ON `ingest_batches` (`tenant_id`,`idempotency_key`);--> statement-breakpoint
CREATE TABLE `kept_records` (
	`reservoir_id` integer NOT NULL,
	`seq` integer NOT NULL,
	`data` blob NOT NULL,
	PRIMARY KEY(`reservoir_id`, `seq`),
	FOREIGN KEY (`reservoir_id`) REFERENCES `reservoirs`(`id`) ON UPDATE no action ON DELETE cascade
);
--> statement-breakpoint
CREATE TABLE `reservoirs` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`tenant_id` integer NOT NULL,
	`collector_id` integer NOT NULL,
	`window_start` integer NOT NULL,
	`window_seconds` integer NOT NULL,
	`node` text NOT NULL,
	`k` integer NOT NULL,
	`tau` real DEFAULT 0 NOT NULL,
	`records` integer DEFAULT 0 NOT NULL,
	`bytes` text DEFAULT '0' NOT NULL,
	`packets` text DEFAULT '0' NOT NULL,
	`next_seq` integer DEFAULT 0 NOT NULL,
	`updated_at` integer NOT NULL,
	FOREIGN KEY (`tenant_id`) REFERENCES `tenants`(`id`) ON UPDATE no action ON DELETE cascade,
	FOREIGN KEY (`collector_id`) REFERENCES `collectors`(`id`) ON UPDATE no action ON DELETE cascade
);
--> statement-breakpoint
CREATE INDEX `reservoirs_tenant_window_idx` ON `reservoirs` (`tenant_id`,`window_start`);--> statement-breakpoint
CREATE UNIQUE INDEX `reservoirs_key_unique` ON `reservoirs` (`tenant_id`,`collector_id`,`window_start`,`window_seconds`,`node`);--> statement-breakpoint
CREATE TABLE `tenants` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`slug` text NOT NULL,
	`name` text NOT NULL,
	`sample_size` integer DEFAULT 1024 NOT NULL,
	`window_seconds` integer DEFAULT 300 NOT NULL,
	`weight_attribute` text DEFAULT 'bytes' NOT NULL,
	`retention_days` integer DEFAULT 30 NOT NULL,
	`created_at` integer NOT NULL,
	CONSTRAINT "tenants_weight_attribute_check" CHECK("tenants"."weight_attribute" in ('bytes', 'packets')),
	CONSTRAINT "tenants_sample_size_check" CHECK("tenants"."sample_size" > 0),
	CONSTRAINT "tenants_window_seconds_check" CHECK("tenants"."window_seconds" > 0)
);
--> statement-breakpoint
CREATE UNIQUE INDEX `tenants_slug_unique` ON `tenants` (`slug`);