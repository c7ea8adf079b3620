using System.Collections;
using System.Reflection;
using System.Text.Json;
using System.Text.RegularExpressions;

namespace Bitbudget.Service.Problems;

/// <summary>
/// Turns System.Text.Json's errors on a request body into a 400 that names the field and the JSON type it
/// takes ("budget.bytes must be a whole number"), never a .NET type name, which means nothing to a client.
/// </summary>
internal static partial class JsonBodyError
{
    public static ServiceException From(JsonException exception, Type root, string what)
    {
        ArgumentNullException.ThrowIfNull(exception);
        var field = FieldName(exception.Path);
        if (UnknownMember().Match(exception.Message) is { Success: true } unknown)
        {
            // The reader's path already ends at the unknown member; its parent is the object that lacks it.
            var member = unknown.Groups["name"].Value;
            var name = field is null ? member : field.EndsWith(member, StringComparison.Ordinal) ? field : $"{field}.{member}";
            var parent = field is not null && field.EndsWith(member, StringComparison.Ordinal) ? ParentPath(exception.Path) : exception.Path;
            var known = string.Join(", ", JsonNames(TypeAt(root, parent) ?? root));
            return ServiceException.Invalid(name, $"Unknown field '{name}' in the {what}; the fields are {known}.");
        }

        if (exception.Message.Contains("could not be converted", StringComparison.Ordinal))
        {
            if (field is null)
            {
                return ServiceException.Invalid("body", $"The body is not a valid {what}: it must be {JsonKind(root)}.");
            }

            var expected = TypeAt(root, exception.Path) is { } type ? JsonKind(type) : "another JSON type";
            return ServiceException.Invalid(field, $"{field} must be {expected}.");
        }

        var where = exception.LineNumber is { } line
            ? $" at line {line + 1}, byte {exception.BytePositionInLine + 1}"
            : "";
        return ServiceException.Invalid("body", $"The body is not a valid {what}: it is not valid JSON{where}: {Sentence(exception.Message)}");
    }

    /// <summary>"$.budget.bytes" gives "budget.bytes", "$.bits[2]" gives "bits[2]"; null for the whole body.</summary>
    private static string? FieldName(string? path) =>
        path is null || path == "$" ? null : path.StartsWith("$.", StringComparison.Ordinal) ? path[2..] : path.TrimStart('$');

    private static string? ParentPath(string? path)
    {
        if (path is null)
        {
            return null;
        }

        var cut = path.LastIndexOf('.');
        return cut <= 0 ? "$" : path[..cut];
    }

    /// <summary>The .NET type a JSON path lands on in <paramref name="root"/>; null when it cannot be followed.</summary>
    private static Type? TypeAt(Type root, string? path)
    {
        var type = root;
        if (path is null)
        {
            return type;
        }

        foreach (Match step in PathStep().Matches(path))
        {
            type = Nullable.GetUnderlyingType(type) ?? type;
            if (step.Groups["index"].Success)
            {
                type = ElementType(type);
            }
            else if (Dictionary(type) is { } valueType)
            {
                type = valueType;
            }
            else
            {
                var name = step.Groups["name"].Value;
                type = type.GetProperties(BindingFlags.Public | BindingFlags.Instance)
                    .FirstOrDefault(p => string.Equals(p.Name, name, StringComparison.OrdinalIgnoreCase))?.PropertyType;
            }

            if (type is null)
            {
                return null;
            }
        }

        return type;
    }

    private static string JsonKind(Type type)
    {
        type = Nullable.GetUnderlyingType(type) ?? type;
        if (type == typeof(string))
        {
            return "a string";
        }

        if (type == typeof(bool))
        {
            return "true or false";
        }

        if (type == typeof(int) || type == typeof(long) || type == typeof(short))
        {
            return "a whole number";
        }

        if (type == typeof(double) || type == typeof(float) || type == typeof(decimal))
        {
            return "a number";
        }

        if (Dictionary(type) is { } value)
        {
            return $"an object whose values are {Plural(JsonKind(value))}";
        }

        if (type != typeof(string) && typeof(IEnumerable).IsAssignableFrom(type))
        {
            return $"an array of {Plural(JsonKind(ElementType(type)!))}";
        }

        return $"an object with the fields {string.Join(", ", JsonNames(type))}";
    }

    private static string Plural(string kind) => kind switch
    {
        "a string" => "strings",
        "a whole number" => "whole numbers",
        "a number" => "numbers",
        "true or false" => "true or false",
        _ => kind,
    };

    private static IEnumerable<string> JsonNames(Type type) =>
        type.GetProperties(BindingFlags.Public | BindingFlags.Instance).Select(p => JsonNamingPolicy.CamelCase.ConvertName(p.Name));

    private static Type? ElementType(Type type) =>
        type.IsArray ? type.GetElementType() : type.GetGenericArguments().FirstOrDefault();

    private static Type? Dictionary(Type type) =>
        type.IsGenericType && type.GetGenericArguments() is [_, var value]
            && type.GetInterfaces().Append(type).Any(i => i.IsGenericType && i.GetGenericTypeDefinition() == typeof(IReadOnlyDictionary<,>))
            ? value
            : null;

    /// <summary>The reader's message up to where it starts naming paths and positions, which the problem gives separately.</summary>
    private static string Sentence(string message)
    {
        var cut = message.IndexOf(" Path:", StringComparison.Ordinal);
        var text = cut > 0 ? message[..cut] : message;
        return text.Contains("System.", StringComparison.Ordinal) || text.Contains("Bitbudget.", StringComparison.Ordinal)
            ? "the body does not have the expected shape."
            : text;
    }

    [GeneratedRegex(@"The JSON property '(?<name>[^']*)' could not be mapped")]
    private static partial Regex UnknownMember();

    [GeneratedRegex(@"\.(?<name>[^.\[]+)|\[(?<index>\d+)\]|\['(?<name>[^']+)'\]")]
    private static partial Regex PathStep();
}
