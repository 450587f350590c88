import { EventEmitter } from 'node:events';

/**
 * An event emitter whose event names and payloads come from one map type, so `on('flush', p => …)`
 * knows `p`'s shape. One payload object per event. An `'error'` event with no listener is dropped
 * instead of thrown: whoever emits it has already recorded the failure in its state.
 */
export class TypedEmitter<Events extends object> {
  private readonly emitter = new EventEmitter();

  on<E extends keyof Events & string>(event: E, listener: (payload: Events[E]) => void): void {
    this.emitter.on(event, listener as (payload: unknown) => void);
  }

  off<E extends keyof Events & string>(event: E, listener: (payload: Events[E]) => void): void {
    this.emitter.off(event, listener as (payload: unknown) => void);
  }

  once<E extends keyof Events & string>(event: E, listener: (payload: Events[E]) => void): void {
    this.emitter.once(event, listener as (payload: unknown) => void);
  }

  emit<E extends keyof Events & string>(event: E, payload: Events[E]): void {
    if (event === 'error' && this.emitter.listenerCount('error') === 0) return;
    this.emitter.emit(event, payload);
  }

  /** Lets an emitter skip building a payload nobody listens to. */
  listenerCount(event: keyof Events & string): number {
    return this.emitter.listenerCount(event);
  }
}
