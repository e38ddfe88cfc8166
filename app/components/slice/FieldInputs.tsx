import { FILTER_FIELDS, type FilterName, type InputSection } from "~/query/fields";
import { CHIP_CHECKS } from "~/slice/chips";
import { ChipInput } from "./ChipInput";

interface FieldInputsProps {
  section: InputSection;
  lists: Record<FilterName, string[]>;
  onList(field: FilterName, values: string[]): void;
}

/**
 * The chip inputs of one section of the Slice form, one per field of fields.ts that has an
 * input there, in the table's order: label, placeholder and hint from the table, the check of
 * the field's kind (chips.ts), the list under the field's name (which is also its URL parameter).
 */
export function FieldInputs({ section, lists, onList }: FieldInputsProps) {
  return (
    <>
      {FILTER_FIELDS.map((field) => {
        if (!("input" in field) || field.input.section !== section) return null;
        const input: { label: string; placeholder: string; hint?: string } = field.input;
        return (
          <ChipInput
            key={field.name}
            label={input.label}
            values={lists[field.name]}
            onChange={(values) => onList(field.name, values)}
            check={CHIP_CHECKS[field.value]}
            placeholder={input.placeholder}
            hint={input.hint}
          />
        );
      })}
    </>
  );
}
