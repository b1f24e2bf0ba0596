import { createRoot } from 'react-dom/client';
import { App } from './App';
import { connectDesktop, connectServed, desktopShell } from './connection';
import { Store } from './store';
import { registerStore } from './test-hooks';

const root = createRoot(document.getElementById('root')!);
const shell = desktopShell();
const store = new Store();
registerStore(() => store.toJSON());
(shell ? connectDesktop() : connectServed()).then(
  (client) => root.render(<App client={client} store={store} shell={shell} />),
  (e: Error) => root.render(<div className="error" role="alert">{e.message}</div>),
);
