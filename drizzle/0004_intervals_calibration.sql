CREATE TABLE `window_checks` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`tenant_id` integer NOT NULL,
	`collector_id` integer NOT NULL,
	`window_start` integer NOT NULL,
	`window_seconds` integer NOT NULL,
	`metric` text NOT NULL,
	`estimate` real NOT NULL,
	`low` real NOT NULL,
	`high` real NOT NULL,
	`exact` text NOT NULL,
	`covered` integer NOT NULL,
	`method` text NOT NULL,
	`checked_at` integer NOT NULL,
	FOREIGN KEY (`tenant_id`) REFERENCES `tenants`(`id`) ON UPDATE no action ON DELETE cascade,
	FOREIGN KEY (`collector_id`) REFERENCES `collectors`(`id`) ON UPDATE no action ON DELETE cascade
);
--> statement-breakpoint
CREATE INDEX `window_checks_tenant_window_idx` ON `window_checks` (`tenant_id`,`window_start`);--> statement-breakpoint
CREATE UNIQUE INDEX `window_checks_key_unique` ON `window_checks` (`tenant_id`,`collector_id`,`window_start`,`window_seconds`,`metric`);--> statement-breakpoint
ALTER TABLE `tenants` ADD `hourly_sample_size` integer;