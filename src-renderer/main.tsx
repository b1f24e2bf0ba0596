import { createRoot } from 'react-dom/client';
import { App } from './App';
import { connectServed } from './connection';
import { Store } from './store';

const root = createRoot(document.getElementById('root')!);
connectServed().then(
  (client) => root.render(<App client={client} store={new Store()} />),
  (e: Error) => root.render(<div className="error" role="alert">{e.message}</div>),
);
