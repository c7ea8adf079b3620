namespace Bitbudget.Service.Commands;

/// <summary>The <c>--out</c> folder cannot be written; the message is one sentence naming it.</summary>
internal sealed class OutputFolderException(string message, Exception? inner = null) : Exception(message, inner);
