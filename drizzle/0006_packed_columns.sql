CREATE TABLE `packed_columns` (
	`reservoir_id` integer PRIMARY KEY NOT NULL,
	`next_seq` integer NOT NULL,
	`data` blob NOT NULL,
	FOREIGN KEY (`reservoir_id`) REFERENCES `reservoirs`(`id`) ON UPDATE no action ON DELETE cascade
);
