CREATE TABLE `imported_windows` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`tenant_id` integer NOT NULL,
	`import_id` integer NOT NULL,
	`source_collector` text NOT NULL,
	`source_node` text NOT NULL,
	`window_start` integer NOT NULL,
	`window_seconds` integer NOT NULL,
	FOREIGN KEY (`tenant_id`) REFERENCES `tenants`(`id`) ON UPDATE no action ON DELETE cascade,
	FOREIGN KEY (`import_id`) REFERENCES `sample_imports`(`id`) ON UPDATE no action ON DELETE cascade
);
--> statement-breakpoint
CREATE INDEX `imported_windows_import_idx` ON `imported_windows` (`import_id`);--> statement-breakpoint
CREATE UNIQUE INDEX `imported_windows_provenance_unique` ON `imported_windows` (`tenant_id`,`source_collector`,`source_node`,`window_start`,`window_seconds`);--> statement-breakpoint
CREATE TABLE `sample_imports` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`tenant_id` integer NOT NULL,
	`collector_id` integer NOT NULL,
	`digest` text NOT NULL,
	`windows` integer NOT NULL,
	`kept` integer NOT NULL,
	`records` integer NOT NULL,
	`from_ms` integer NOT NULL,
	`to_ms` integer NOT NULL,
	`created_by` text NOT NULL,
	`created_at` integer NOT NULL,
	FOREIGN KEY (`tenant_id`) REFERENCES `tenants`(`id`) ON UPDATE no action ON DELETE cascade,
	FOREIGN KEY (`collector_id`) REFERENCES `collectors`(`id`) ON UPDATE no action ON DELETE cascade
);
--> statement-breakpoint
CREATE UNIQUE INDEX `sample_imports_digest_unique` ON `sample_imports` (`tenant_id`,`digest`);--> statement-breakpoint
ALTER TABLE `collectors` ADD `copy_of` text;--> statement-breakpoint
ALTER TABLE `collectors` ADD `late_records` integer DEFAULT 0 NOT NULL;--> statement-breakpoint
ALTER TABLE `collectors` ADD `time_refused_records` integer DEFAULT 0 NOT NULL;--> statement-breakpoint
ALTER TABLE `collectors` ADD `clock_skewed_records` integer DEFAULT 0 NOT NULL;--> statement-breakpoint
ALTER TABLE `collectors` ADD `ignored_fields` integer DEFAULT 0 NOT NULL;