/** Placeholder: repository interfaces for interim looks and balanced assignments (interim-monitoring issue). */
// eslint-disable-next-line @typescript-eslint/no-empty-object-type
export interface LookRepository {}
// eslint-disable-next-line @typescript-eslint/no-empty-object-type
export interface AssignmentRepository {}
