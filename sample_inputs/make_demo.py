"""Generate the invented demo exports of the Nimbrel Rides rider support desk.

Nimbrel Rides is a made-up bike-and-scooter sharing service in the made-up city of Eastmoor Bay.
Every name, station, address and number below is invented, or reserved for examples and
fiction (see the comments at the constants). Nothing here comes from a real ticket.

Usage::

    python sample_inputs/make_demo.py                       # rewrite the committed demo in exports/
    python sample_inputs/make_demo.py --rows 1000000 --out DIR --seed 7

Four files are written, on purpose in four different shapes (see README.md beside this file):
``desk.csv`` (UTF-8 with BOM, CRLF, RFC 4180 quoting, multi-line bodies), ``webform.jsonl``
(HTML bodies, nulls, missing keys, corrupt lines), ``chat.parquet`` (no title column, a real
timestamp type) and ``legacy.tsv`` (latin-1, tab separated, no quoting, a stray tab or two).

Invariants:

- Same ``--rows`` and ``--seed`` give the same bytes, on any machine with the same polars
  version (only ``chat.parquet`` depends on the polars writer; the text files are written by
  the standard library). All randomness comes from one ``random.Random(seed)``.
- The four sources hold ``SOURCE_SHARES`` of the rows, exactly (largest remainder rounding);
  class counts follow ``CLASSES`` exactly in the same way, so the two rare classes have only a
  handful of rows at the default size.
- Records in each file are in ``opened`` order; a copy is always opened after its original.
- The default run must reproduce the committed ``exports/`` byte for byte
  (``tests/test_demo_generator.py`` checks it): change the script, then regenerate.

Per-row work is a few template fills on plain dicts; 1,000,000 rows (about 320 MB) take about
45 s on a busy two-core machine.
"""

from __future__ import annotations

import argparse
import csv
import gc
import io
import json
import random
import unicodedata
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import polars as pl

DEFAULT_ROWS = 3000
DEFAULT_SEED = 20250417
DEFAULT_OUT = Path(__file__).resolve().parent / "exports"

SOURCES = ("desk", "webform", "chat", "legacy")
SOURCE_SHARES = {"desk": 0.35, "webform": 0.30, "chat": 0.20, "legacy": 0.15}
FILE_NAMES = {"desk": "desk.csv", "webform": "webform.jsonl", "chat": "chat.parquet", "legacy": "legacy.tsv"}

# The share of each kind of defect, of all rows. Chosen for the demo (no source): large enough
# to show up in the ledger of a 3,000-row run, small enough to leave a usable data set.
EXACT_COPY_SHARE = 0.05      # copies that differ only in case, whitespace, HTML, invisible characters
NEAR_COPY_SHARE = 0.03       # copies with "Re:", a signature, a fixed typo or one more sentence
LABEL_CONFLICT_SHARE = 0.15  # of the exact copies: filed under another class than the original
NEAR_CONFLICT_SHARE = 0.10   # of the near copies
MISSING_LABEL_SHARE = 0.02
EMPTY_TEXT_SHARE = 0.006     # title and body both empty
EMPTY_BODY_SHARE = 0.01      # body empty, title present (the demo fills body from title)
CORRUPT_JSON_SHARE = 0.0007  # webform lines cut short or not JSON: 2 at the default size
STRAY_TAB_SHARE = 0.0005     # legacy rows with a tab inside the text: 2 at the default size
# Share of non-English tickets: the legacy system came from an operator with many visitors.
FOREIGN_SHARE = {"desk": 0.065, "webform": 0.065, "chat": 0.065, "legacy": 0.30}
FOREIGN_LANGUAGES = (("es", 0.40), ("de", 0.35), ("fr", 0.25))

START_EPOCH = 1704067200      # 2024-01-01T00:00:00Z
SPAN_SECONDS = 731 * 86400    # two years, to 2025-12-31

# ---------------------------------------------------------------------------------------------
# Classes: key, spelling in the desk tool, share. Shares sum to 1; the last two are the rare ones.
CLASSES: tuple[tuple[str, str, float], ...] = (
    ("billing", "Billing", 0.30),
    ("app_login", "App & Login", 0.15),
    ("unlock_dock", "Unlock & Docking", 0.14),
    ("damage", "Damage Report", 0.11),
    ("lost", "Lost & Found", 0.08),
    ("fines", "Parking & Fines", 0.07),
    ("closure", "Account Closure", 0.06),
    ("access", "Accessibility", 0.045),
    ("safety", "Safety Incident", 0.0422),
    ("press", "Press Enquiry", 0.0016),
    ("partner", "Partnerships", 0.0012),
)
DISPLAY = {key: name for key, name, _ in CLASSES}
RARE = frozenset({"press", "partner"})

# ---------------------------------------------------------------------------------------------
# Slot fillers. Station names are invented for Eastmoor Bay; some carry accents on purpose.
STATIONS = (
    "Quarry Lane", "Tidewater Square", "Old Mill Steps", "Harbourview", "Lantern Market",
    "Copperfield Row", "Juniper Park", "Saltmarsh Halt", "North Pier", "Ropewalk", "Cinder Hill",
    "Weavers Yard", "Kingfisher Bridge", "Observatory Rise", "Plaza Añil", "Brückenhof Gate",
    "Quai Ménard", "Fennick Street", "Orchard Loop", "Gullwing Terrace", "Tannery Close",
    "Bellrope Corner", "Eastmoor Station", "Marrow Hill", "Seaglass Walk",
)
FIRST_NAMES = (
    "Mara", "Tobin", "Ilse", "Corwin", "Nadia", "Perrin", "Yusra", "Elko", "Brenna", "Dario",
    "Solveig", "Kofi", "Linnea", "Rafe", "Anouk", "Teodor", "Wren", "Jalen", "Maelle", "Osric",
    "Priya", "Bastian", "Leocadia", "Hamish", "Zofia", "Inès", "Jürgen", "Begoña", "Aurélie", "Søren",
)
LAST_NAMES = (
    "Lindqvist", "Ashdown", "Varga", "Pellow", "Okafor", "Brightwater", "Castellan", "Merriday",
    "Tolland", "Quenby", "Hartigan", "Sorensby", "Delacombe", "Fairweather", "Nakamori", "Oakhurst",
    "Pimlott", "Rosenfeld", "Strand", "Wexley", "Muñoz Ferrer", "Schäfer", "Lefèvre", "Bøgh",
)
# RFC 2606, section 3: example.com, example.net and example.org are reserved for documentation.
EMAIL_DOMAINS = ("example.com", "example.org", "example.net")
# Test card numbers widely published by payment providers for testing (from memory); each
# passes the Luhn check and none is a real account.
TEST_CARDS = ("4111 1111 1111 1111", "5555 5555 5555 4444", "4012 8888 8888 1881", "3782 822463 10005")
# Example IBANs as printed in IBAN documentation (GB82 WEST ... is the ISO 13616 / registry
# example; the others are the commonly printed country examples) -- from memory; each passes
# the ISO 7064 MOD 97-10 check (tests/test_demo_generator.py verifies it).
EXAMPLE_IBANS = ("GB82 WEST 1234 5698 7654 32", "DE89 3704 0044 0532 0130 00", "FR14 2004 1010 0505 0001 3M02 606")
DEVICES = ("Pixelon 7", "an old tablet", "a Lumo X2 phone", "my work phone", "a Veyra S3")


# int(random() * n) instead of randrange(n): several times faster, which matters at a million
# rows; its bias (of order n / 2**53) is irrelevant for invented data.
def _below(rng: random.Random, n: int) -> int:
    return int(rng.random() * n)


def _between(rng: random.Random, low: int, high: int) -> int:
    """An integer in [low, high)."""
    return low + int(rng.random() * (high - low))


def _uk_drama_phone(rng: random.Random) -> str:
    # Ofcom reserves 07700 900000 to 07700 900999 for drama and fiction (from memory).
    return f"07700 900{_below(rng, 1000):03d}"


def _us_fiction_phone(rng: random.Random) -> str:
    # 555-0100 to 555-0199 are reserved for fictional use in the North American plan (from memory).
    return f"(555) 555-01{_below(rng, 100):02d}"


@dataclass(frozen=True)
class Language:
    """Everything a ticket in one language is written from. Templates use ``{slot}`` names."""

    code: str
    days: Sequence[str]
    items: Sequence[str]
    parts: Sequence[str]
    plans: Sequence[str]
    greetings: Sequence[str]
    signoffs: Sequence[str]
    details: Sequence[str]
    contexts: Sequence[str]        # an optional sentence of background, any class
    extras: Sequence[str]          # "one more sentence" for near copies
    signatures: Sequence[str]      # appended by near copies
    reply_prefix: str
    amount: Callable[[random.Random], str]
    titles: dict[str, Sequence[str]] = field(default_factory=dict)
    cores: dict[str, Sequence[str]] = field(default_factory=dict)


def _pounds(rng: random.Random) -> str:
    return f"£{_between(rng, 1, 60)}.{_below(rng, 100):02d}"


def _euros(rng: random.Random) -> str:
    return f"{_between(rng, 1, 60)},{_below(rng, 100):02d} EUR"


EN = Language(
    code="en",
    days=("Monday", "Tuesday", "Wednesday", "Thursday", "Friday", "Saturday", "Sunday"),
    items=("phone", "wallet", "house keys", "sunglasses", "backpack", "laptop charger", "umbrella",
           "headphones", "child's helmet", "bus pass", "water bottle"),
    parts=("mudguard", "bell", "kickstand", "basket", "handlebar grip", "pedal", "display", "brake lever"),
    plans=("Monthly Pass", "Annual Pass", "Student Pass", "Pay-as-you-go bundle", "Weekend Pass"),
    greetings=("Hi,", "Hello,", "Hello team,", "Good morning,", "Dear support,", "Hi there,"),
    signoffs=("Thanks, {first}", "Best regards,\n{name}", "Cheers", "Thank you in advance.", "Kind regards,\n{name}"),
    details=(
        "You can reach me on {phone}.", "My email is {email} if you need more details.",
        "The card on my account is {card}.", "Please send any refund to {iban}.",
        "My order number is {order}.", "I'm on app version {version} on {device}.",
        "This is the second time this month.", "I have been a member since {year}.",
        "My phone number is {phone} and the ride was on {day}.", "Reference from the receipt: {order}.",
    ),
    contexts=(
        "I ride most days between {station} and {station2} to get to work.",
        "I only started using Nimbrel Rides a few weeks ago, so maybe I missed something.",
        "This was on {day}, on my way home from {station}, at about {time}.",
        "I have a {plan} and normally everything works fine.",
        "My partner uses the same app and has had a similar problem.",
        "I read the Fares & Passes page and the Help & FAQ section before writing this.",
        "I called the hotline but nobody answered after {minutes} minutes.",
    ),
    extras=("Any update on this?", "I still have not heard back.", "I have attached a screenshot.",
            "Please let me know if you need anything else.", "It happened again today."),
    signatures=("Sent from my phone", "--\n{name}", "Sent from my tablet"),
    reply_prefix="Re: ",
    amount=_pounds,
    titles={
        "billing": ("Charged twice for one ride", "Refund request for ride on {day}", "Unexpected charge of {amount}",
                    "Monthly pass renewed without asking", "Wrong fare for my trip from {station}", "Billing question"),
        "app_login": ("Can't log in to the app", "Verification code never arrives", "App crashes on start ({version})",
                      "Password reset link expired", "Logged out after update"),
        "unlock_dock": ("Scooter won't unlock at {station}", "Bike stuck in dock", "Dock did not register my return",
                        "QR code scan fails", "Ride did not end at {station}"),
        "damage": ("Broken brake on {vehicle}", "Reporting a damaged scooter at {station}", "Flat tyre",
                   "Loose {part}", "Damaged bike"),
        "lost": ("Left my {item} in a basket", "Lost item at {station}", "Has anyone handed in my {item}?",
                 "Lost property"),
        "fines": ("Parking fine for a ride I ended correctly", "Fee for parking outside the zone",
                  "Penalty notice from the council", "Out-of-zone fee of {amount}"),
        "closure": ("Please close my account", "Delete my account and data", "Cancel membership",
                    "Close account and refund credit"),
        "access": ("Adapted bikes at {station}?", "Screen reader cannot read the unlock button", "Request for a trike",
                   "Accessibility of the app"),
        "safety": ("Collision near {station}", "Scooter accelerated on its own", "Unsafe riding report",
                   "Headlight failed at night"),
        "press": ("Press enquiry about the scooter trial", "Interview request from a local paper"),
        "partner": ("Partnership proposal", "Corporate accounts for our staff"),
    },
    cores={
        "billing": (
            "I was charged {amount} twice for the same ride from {station} to {station2} on {day}.",
            "My {plan} renewed automatically even though I cancelled it last month, and {amount} was taken from my card.",
            'The receipt says "Payment failed" but my bank shows the {amount} as taken. Please check and refund it.',
            "The ride only lasted {minutes} minutes but the app billed me {amount}, which looks like the fare for a much longer trip.",
            "I used a promo code at {station} and it was not applied, so I paid {amount} instead of nothing.",
            "I ended the ride at {station} but the meter kept running until {time}, so the fare came to {amount}.",
        ),
        "app_login": (
            "Every time I open the app on version {version} it shows a blank screen and then closes.",
            "I asked for a login code three times on {day} but no text message ever arrived.",
            'The password reset link in your email says "link expired" even when I click it straight away.',
            "After the update to {version} the app logged me out and now says my account does not exist.",
            "The map will not load past the splash screen, so I cannot see any vehicles near {station}.",
        ),
        "unlock_dock": (
            "I scanned the QR code on {vehicle} at {station} and the app said unlocked, but the lock stayed shut.",
            "I pushed {vehicle} into dock {dock} at {station} and the light stayed red, so the ride never ended.",
            "The dock at {station} would not release the bike; I tried three times over {minutes} minutes.",
            "The app showed free docks at {station} but every dock was full when I got there at {time}.",
            'The lock clicked but the app still shows {vehicle} as "in use" and the timer is running.',
        ),
        "damage": (
            "The front brake on {vehicle} barely works; I left it at {station} and marked it as faulty.",
            "{Vehicle} at {station} has a cracked {part} and someone could get hurt.",
            "The {part} on the bike I rented on {day} came loose halfway down the hill.",
            "Someone has sprayed paint over the display of {vehicle} so you can't read the speed or the battery.",
            "The rear tyre was completely flat when I picked up {vehicle}, so I parked it again after {minutes} minutes.",
        ),
        "lost": (
            "I left my {item} in the front basket of {vehicle} at {station} on {day} around {time}.",
            "I think my {item} fell out while I was riding from {station} to {station2}. Has anyone found it?",
            "If my {item} was handed in at {station}, please keep it for me; I can collect it on {day}.",
            "My {item} has a yellow tag with my initials on it. I lost it somewhere near {station}.",
        ),
        "fines": (
            "I was charged a {amount} parking fee although I left {vehicle} inside the marked zone at {station}.",
            "The council sent me a penalty notice for a scooter left on the pavement at {station}, but I ended that ride somewhere else.",
            "The app said the parking photo was accepted, yet I got a {amount} out-of-zone fee an hour later.",
            "The no-parking area around {station} is not shown on the map, so I could not have known.",
        ),
        "closure": (
            "I am moving away from Eastmoor Bay and would like my account closed and the remaining credit of {amount} refunded.",
            "Please delete my account and all personal data you hold about me.",
            "I want to cancel my {plan} and close the account at the end of this month.",
            "I no longer use the service; please close my account and confirm by email.",
        ),
        "access": (
            "Are there any adapted tricycles at {station}? I need one with a low step-through frame.",
            "The unlock button in version {version} is not read out by my screen reader, so I can't start a ride.",
            "The text in the app is too small even with large fonts switched on, and the ride summary gets cut off.",
            "Could you add a longer unlock window for riders who need more time to get on the bike?",
        ),
        "safety": (
            "I was hit by another rider near {station} on {day} at about {time}; nobody was badly hurt but the scooter was damaged.",
            "{Vehicle} suddenly accelerated while I was braking at {station}. This is dangerous.",
            "Riders keep using the pavement outside {station} at high speed; someone is going to get injured.",
            "The headlight on {vehicle} switched off after dark and I almost collided with a car.",
        ),
        "press": (
            "I am writing a piece for a community newsletter on the scooter trial and would like to ask a few questions.",
            "Could someone from your team speak to our podcast about safety figures from the last season?",
            "Please send me the press contact for the expansion to {station}.",
        ),
        "partner": (
            "Our company would like to offer ride credit to staff near {station}; who should we talk to?",
            "We run a café at {station} and would like to host a docking point.",
        ),
    },
)

ES = Language(
    code="es",
    days=("el lunes", "el martes", "el miércoles", "el jueves", "el viernes", "el sábado", "el domingo", "ayer"),
    items=("el móvil", "la cartera", "las llaves", "las gafas de sol", "la mochila", "el paraguas"),
    parts=("guardabarros", "timbre", "pedal", "sillín", "manillar"),
    plans=("abono mensual", "abono anual", "abono de estudiante"),
    greetings=("Hola,", "Buenos días,", "Estimado equipo:", "Buenas tardes,"),
    signoffs=("Gracias, {first}", "Un saludo,\n{name}", "Muchas gracias de antemano."),
    details=("Mi teléfono es el {phone}.", "Mi correo es {email}.", "La tarjeta de la cuenta es {card}.",
             "Por favor, devolved el importe a {iban}.", "El número de pedido es {order}.",
             "Uso la versión {version} de la aplicación."),
    contexts=("Uso el servicio casi todos los días para ir al trabajo desde {station}.",
              "Es la primera vez que me pasa algo así.",
              "Fue {day} por la tarde, volviendo a casa desde {station2}."),
    extras=("¿Hay alguna novedad?", "Todavía no he recibido respuesta.", "Adjunto una captura de pantalla."),
    signatures=("Enviado desde mi móvil", "--\n{name}"),
    reply_prefix="RE: ",
    amount=_euros,
    titles={
        "billing": ("Cobro duplicado", "Me habéis cobrado {amount} de más", "Reembolso de un viaje"),
        "app_login": ("No puedo iniciar sesión", "La aplicación se cierra sola"),
        "unlock_dock": ("No se desbloquea el patinete", "La bici no se suelta del anclaje en {station}"),
        "damage": ("Freno roto en {vid}", "Patinete dañado en {station}"),
        "lost": ("He perdido {item}", "Objeto olvidado en {station}"),
        "fines": ("Multa de aparcamiento injusta", "Cargo por aparcar fuera de zona"),
        "closure": ("Quiero darme de baja", "Borrar mi cuenta"),
        "access": ("¿Hay triciclos adaptados?", "La aplicación no funciona con el lector de pantalla"),
        "safety": ("Accidente cerca de {station}", "El patinete aceleró solo"),
    },
    cores={
        "billing": ("Me habéis cobrado {amount} dos veces por el mismo viaje de {station} a {station2} {day}.",
                    "El viaje duró {minutes} minutos pero la aplicación me cobró {amount}. ¿Podéis revisarlo?",
                    "Cancelé el {plan} el mes pasado y aun así se renovó y me cobraron {amount}."),
        "app_login": ("No me llega el código de verificación por SMS y no puedo entrar en mi cuenta.",
                      "Desde la actualización a la versión {version} la aplicación se cierra al abrirla."),
        "unlock_dock": ("Escaneé el código QR del patinete {vid} en {station} pero el candado no se abrió.",
                        "Dejé la bici en el anclaje {dock} de {station} y la luz siguió en rojo, así que el viaje no terminó."),
        "damage": ("El freno delantero del {vid} casi no funciona; lo dejé en {station}.",
                   "El {part} de la bici que alquilé {day} está roto y alguien se puede hacer daño."),
        "lost": ("Me dejé {item} en la cesta de la bici {vid} en {station} {day} hacia las {time}.",
                 "Creo que perdí {item} entre {station} y {station2}. ¿Alguien ha entregado algo?"),
        "fines": ("Me cobraron {amount} por aparcar fuera de zona, pero dejé el patinete dentro de la zona marcada en {station}.",
                  "El ayuntamiento me ha enviado una multa por un patinete en la acera de {station}, pero yo terminé el viaje en otro sitio."),
        "closure": ("Me mudo de ciudad y quiero cerrar mi cuenta y recuperar el saldo de {amount}.",
                    "Por favor, borrad mi cuenta y todos mis datos personales."),
        "access": ("¿Hay triciclos adaptados en {station}? Necesito uno con el cuadro bajo.",
                   "El lector de pantalla no lee el botón de desbloqueo en la versión {version}."),
        "safety": ("Otro usuario chocó conmigo cerca de {station} {day} sobre las {time}; nadie se hizo daño grave.",
                   "El patinete {vid} aceleró de repente mientras frenaba en {station}. Es muy peligroso."),
    },
)

DE = Language(
    code="de",
    days=("am Montag", "am Dienstag", "am Mittwoch", "am Donnerstag", "am Freitag", "am Samstag", "am Sonntag", "gestern"),
    items=("mein Handy", "mein Portemonnaie", "meinen Schlüsselbund", "meine Sonnenbrille", "meinen Rucksack",
           "meinen Regenschirm"),
    parts=("das Schutzblech", "die Klingel", "das Pedal", "der Korb", "der Bremshebel", "der Ständer"),
    plans=("Monatsabo", "Jahresabo", "Studentenabo"),
    greetings=("Hallo,", "Guten Tag,", "Liebes Support-Team,", "Sehr geehrte Damen und Herren,"),
    signoffs=("Danke und viele Grüße,\n{name}", "Mit freundlichen Grüßen\n{name}", "Gruß, {first}"),
    details=("Sie erreichen mich unter {phone}.", "Meine E-Mail-Adresse ist {email}.",
             "Die hinterlegte Karte ist {card}.", "Bitte überweisen Sie den Betrag auf {iban}.",
             "Die Bestellnummer lautet {order}.", "Ich nutze die App-Version {version}."),
    contexts=("Ich fahre fast jeden Tag von {station} zur Arbeit.",
              "Das ist mir bisher noch nie passiert.",
              "Es war {day} auf dem Heimweg von {station2}."),
    extras=("Gibt es schon Neuigkeiten?", "Ich habe noch keine Antwort bekommen.", "Ein Foto liegt bei."),
    signatures=("Von meinem Handy gesendet", "--\n{name}"),
    reply_prefix="AW: ",
    amount=_euros,
    titles={
        "billing": ("Doppelte Abbuchung", "Falscher Fahrpreis ({amount})", "Erstattung für eine Fahrt"),
        "app_login": ("Anmeldung nicht möglich", "App stürzt beim Start ab"),
        "unlock_dock": ("Roller lässt sich nicht entsperren", "Fahrrad hängt in der Station {station} fest"),
        "damage": ("Bremse an {vid} defekt", "Beschädigter Roller an der Station {station}"),
        "lost": ("Habe {item} im Korb vergessen", "Fundsache an der Station {station}"),
        "fines": ("Ungerechtfertigte Parkgebühr", "Bußgeldbescheid für falsches Parken"),
        "closure": ("Bitte Konto löschen", "Kündigung meiner Mitgliedschaft"),
        "access": ("Gibt es Dreiräder?", "Screenreader liest den Entsperr-Knopf nicht vor"),
        "safety": ("Zusammenstoß bei {station}", "Roller hat von selbst beschleunigt"),
    },
    cores={
        "billing": ("Mir wurden für dieselbe Fahrt von {station} nach {station2} {day} zweimal {amount} abgebucht.",
                    "Die Fahrt hat nur {minutes} Minuten gedauert, trotzdem wurden {amount} berechnet.",
                    "Ich habe mein {plan} letzten Monat gekündigt, es wurde aber verlängert und {amount} abgebucht."),
        "app_login": ("Der Bestätigungscode per SMS kommt nie an, deshalb kann ich mich nicht anmelden.",
                      "Seit dem Update auf Version {version} schließt sich die App sofort wieder."),
        "unlock_dock": ("Ich habe den QR-Code am Roller {vid} an der Station {station} gescannt, aber das Schloss blieb zu.",
                        "Ich habe das Rad in Andockpunkt {dock} an der Station {station} geschoben, das Licht blieb rot und die Fahrt lief weiter."),
        "damage": ("Die Vorderbremse an {vid} funktioniert kaum noch; ich habe ihn an der Station {station} abgestellt.",
                   "An dem Rad, das ich {day} gemietet habe, ist {part} kaputt. Bitte schnell reparieren."),
        "lost": ("Ich habe {item} {day} gegen {time} im Korb von {vid} an der Station {station} liegen lassen.",
                 "Ich habe {item} zwischen {station} und {station2} verloren. Hat jemand etwas abgegeben?"),
        "fines": ("Mir wurde eine Gebühr von {amount} berechnet, obwohl der Roller in der markierten Zone an der Station {station} stand.",
                  "Die Stadt hat mir einen Bußgeldbescheid für einen Roller auf dem Gehweg geschickt, ich habe die Fahrt aber woanders beendet."),
        "closure": ("Ich ziehe weg und möchte mein Konto schließen; bitte erstatten Sie das Guthaben von {amount}.",
                    "Bitte löschen Sie mein Konto und alle über mich gespeicherten Daten."),
        "access": ("Gibt es an der Station {station} Dreiräder mit tiefem Einstieg?",
                   "Der Screenreader liest den Knopf zum Entsperren in Version {version} nicht vor."),
        "safety": ("Bei {station} ist {day} gegen {time} ein anderer Fahrer mit mir zusammengestoßen; zum Glück ist niemand schwer verletzt.",
                   "Der Roller {vid} hat beim Bremsen an der Station {station} plötzlich beschleunigt. Das ist gefährlich."),
    },
)

FR = Language(
    code="fr",
    days=("lundi", "mardi", "mercredi", "jeudi", "vendredi", "samedi", "dimanche", "hier"),
    items=("téléphone", "portefeuille", "trousseau de clés", "casque", "sac à dos", "parapluie"),
    parts=("le garde-boue", "la sonnette", "la pédale", "le panier", "le levier de frein", "la béquille"),
    plans=("abonnement mensuel", "abonnement annuel", "abonnement étudiant"),
    greetings=("Bonjour,", "Madame, Monsieur,", "Bonjour l'équipe,", "Bonsoir,"),
    signoffs=("Merci d'avance, {first}", "Cordialement,\n{name}", "Bien à vous,\n{name}"),
    details=("Vous pouvez me joindre au {phone}.", "Mon adresse e-mail est {email}.",
             "La carte enregistrée est la {card}.", "Merci de rembourser sur le compte {iban}.",
             "Le numéro de commande est {order}.", "J'utilise la version {version} de l'application."),
    contexts=("J'utilise le service presque tous les jours pour aller au travail depuis {station}.",
              "C'est la première fois que cela m'arrive.",
              "C'était {day} soir, en rentrant de {station2}."),
    extras=("Avez-vous du nouveau ?", "Je n'ai toujours pas de réponse.", "Je joins une capture d'écran."),
    signatures=("Envoyé de mon téléphone", "--\n{name}"),
    reply_prefix="RE : ",
    amount=_euros,
    titles={
        "billing": ("Double prélèvement", "Remboursement d'un trajet", "Montant de {amount} incorrect"),
        "app_login": ("Impossible de me connecter", "L'application plante au démarrage"),
        "unlock_dock": ("La trottinette ne se déverrouille pas", "Vélo bloqué dans la borne à {station}"),
        "damage": ("Frein cassé sur {vid}", "Trottinette abîmée à {station}"),
        "lost": ("Objet oublié dans le panier", "J'ai perdu mon {item}"),
        "fines": ("Amende de stationnement injustifiée", "Frais hors zone contestés"),
        "closure": ("Suppression de mon compte", "Résiliation de l'abonnement"),
        "access": ("Tricycles adaptés ?", "Lecteur d'écran et bouton de déverrouillage"),
        "safety": ("Collision près de {station}", "La trottinette a accéléré toute seule"),
    },
    cores={
        "billing": ("J'ai été débité deux fois de {amount} pour le même trajet entre {station} et {station2} {day}.",
                    "Le trajet n'a duré que {minutes} minutes mais l'application m'a facturé {amount}.",
                    "J'ai résilié mon {plan} le mois dernier, pourtant il a été renouvelé et {amount} ont été prélevés."),
        "app_login": ("Je ne reçois jamais le code de vérification par SMS, donc je ne peux pas me connecter.",
                      "Depuis la mise à jour {version}, l'application se ferme dès l'ouverture."),
        "unlock_dock": ("J'ai scanné le code QR de la trottinette {vid} à {station} mais le cadenas est resté fermé.",
                        "J'ai remis le vélo dans la borne {dock} à {station}, le voyant est resté rouge et le trajet ne s'est pas terminé."),
        "damage": ("Le frein avant de {vid} ne fonctionne presque plus ; je l'ai laissé à {station}.",
                   "Sur le vélo loué {day}, {part} ne tient plus du tout."),
        "lost": ("J'ai oublié mon {item} dans le panier du vélo {vid} à {station} {day} vers {time}.",
                 "Mon {item} est tombé entre {station} et {station2}. Quelqu'un l'a-t-il trouvé ?"),
        "fines": ("On m'a facturé {amount} de frais hors zone alors que la trottinette était bien garée dans la zone de {station}.",
                  "La mairie m'a envoyé une amende pour une trottinette sur le trottoir, mais j'avais terminé ce trajet ailleurs."),
        "closure": ("Je déménage et je souhaite fermer mon compte et récupérer le solde de {amount}.",
                    "Merci de supprimer mon compte et toutes mes données personnelles."),
        "access": ("Y a-t-il des tricycles adaptés à {station} ? J'ai besoin d'un cadre bas.",
                   "Le lecteur d'écran ne lit pas le bouton de déverrouillage dans la version {version}."),
        "safety": ("Un autre usager m'a percuté près de {station} {day} vers {time} ; personne n'est gravement blessé.",
                   "La trottinette {vid} a accéléré brusquement pendant que je freinais à {station}. C'est dangereux."),
    },
)

LANGUAGES = {lang.code: lang for lang in (EN, ES, DE, FR)}


# ---------------------------------------------------------------------------------------------
# Small helpers


def exact_counts(shares: Sequence[float], total: int) -> list[int]:
    """Split ``total`` into integers proportional to ``shares`` (largest remainder, ties by order)."""
    raw = [s * total / sum(shares) for s in shares]
    counts = [int(r) for r in raw]
    order = sorted(range(len(raw)), key=lambda i: (-(raw[i] - counts[i]), i))
    for i in order[: total - sum(counts)]:
        counts[i] += 1
    return counts


def _share(total: int, share: float) -> int:
    """``round(total * share)`` with halves rounded up, at least 1 when the share is positive."""
    return max(1 if share > 0 and total > 0 else 0, int(total * share + 0.5))


def _ascii(text: str) -> str:
    """Letters without their accents, for the local part of an e-mail address (ø has no decomposition)."""
    return unicodedata.normalize("NFKD", text.replace("ø", "o")).encode("ascii", "ignore").decode("ascii")


def _vehicle(rng: random.Random, lang: Language) -> str:
    if rng.random() < 0.6:
        return f"scooter S-{_between(rng, 1000, 10000)}"
    return f"bike B-{_between(rng, 1000, 10000)}"


# Slot name -> filler; see _slot_pool. "Vehicle" (capitalised "vehicle") and the author's
# "first", "name" and "email" are added there and in _write_ticket.
_FILLERS: dict[str, Callable[[random.Random, Language], str]] = {
    "station": lambda rng, lang: _pick(rng, STATIONS),
    "station2": lambda rng, lang: _pick(rng, STATIONS),
    "vid": lambda rng, lang: f"{'SB'[_below(rng, 2)]}-{_between(rng, 1000, 10000)}",
    "vehicle": _vehicle,
    "amount": lambda rng, lang: lang.amount(rng),
    "day": lambda rng, lang: _pick(rng, lang.days),
    "time": lambda rng, lang: f"{_between(rng, 6, 24)}:{5 * _below(rng, 12):02d}",
    "minutes": lambda rng, lang: str(_between(rng, 2, 55)),
    "dock": lambda rng, lang: str(_between(rng, 1, 31)),
    "item": lambda rng, lang: _pick(rng, lang.items),
    "part": lambda rng, lang: _pick(rng, lang.parts),
    "plan": lambda rng, lang: _pick(rng, lang.plans),
    # Looks like a number (or a date) but is a version string.
    "version": lambda rng, lang: f"{_between(rng, 3, 6)}.{_below(rng, 20)}.{_below(rng, 10)}",
    # Ten digits: long enough to be mistaken for a phone or account number.
    "order": lambda rng, lang: str(_between(rng, 4_400_000_000, 4_500_000_000)),
    "phone": lambda rng, lang: _uk_drama_phone(rng) if rng.random() < 0.6 else _us_fiction_phone(rng),
    "card": lambda rng, lang: _pick(rng, TEST_CARDS),
    "iban": lambda rng, lang: _pick(rng, EXAMPLE_IBANS),
    "device": lambda rng, lang: _pick(rng, DEVICES),
    "year": lambda rng, lang: str(_between(rng, 2019, 2025)),
}


def _slot_pool(rng: random.Random, lang: Language, size: int) -> list[dict[str, str]]:
    """``size`` complete sets of slot values for one language.

    A ticket takes one set at random and adds its author: every slot of one ticket then agrees
    (the same vehicle in the title and the body), and templates are filled by ``str.format_map``
    on a plain dict, in C. Filling slots one by one in Python made the million-row run three
    times slower.
    """
    pool = []
    for _ in range(size):
        slots = {key: filler(rng, lang) for key, filler in _FILLERS.items()}
        slots["Vehicle"] = slots["vehicle"][:1].upper() + slots["vehicle"][1:]
        pool.append(slots)
    return pool


def _pick(rng: random.Random, options: Sequence[str]) -> str:
    return options[int(rng.random() * len(options))]


# ---------------------------------------------------------------------------------------------
# The tickets, before they are written in each source's shape


@dataclass
class Ticket:
    """One ticket in neutral form: paragraphs of plain text. ``label`` is a class key or None."""

    source: str
    lang: str
    cls: str
    title: str
    paras: list[str]
    person: tuple[str, str, str]
    epoch: int
    label: str | None = None       # class key the ticket is filed under (None: missing)
    missing_kind: int = 0          # which spelling of "missing" a source uses (0..3)
    variations: tuple[str, ...] = ()  # exact-copy disguises: case, spaces, invisible, html
    empty: str = ""                # "" | "all" (no text at all) | "body" (title only)


def _write_ticket(rng: random.Random, source: str, lang: Language, pool: list[dict[str, str]], cls: str,
                  person: tuple[str, str, str], epoch: int) -> Ticket:
    """One original ticket: a title, and a body of greeting, one or two class sentences (with
    some background before or after), a detail that often carries personal-data look-alikes,
    and a sign-off. The hot path of a large run, hence the inlined picks."""
    random_ = rng.random
    slots = pool[int(random_() * len(pool))] | {"first": person[0], "name": person[1], "email": person[2]}
    titles, cores = lang.titles[cls], lang.cores[cls]
    title = titles[int(random_() * len(titles))].format_map(slots)
    first = int(random_() * len(cores))
    text = cores[first].format_map(slots)
    if random_() < 0.9 and len(cores) > 1:
        second = (first + 1 + int(random_() * (len(cores) - 1))) % len(cores)
        text += " " + cores[second].format_map(slots)
    if random_() < 0.45:
        context = lang.contexts[int(random_() * len(lang.contexts))].format_map(slots)
        text = context + " " + text if random_() < 0.5 else text + " " + context
    paras = [lang.greetings[int(random_() * len(lang.greetings))], text] if random_() < 0.7 else [text]
    if random_() < 0.6:
        paras.append(lang.details[int(random_() * len(lang.details))].format_map(slots))
    if random_() < 0.6:
        paras.append(lang.signoffs[int(random_() * len(lang.signoffs))].format_map(slots))
    return Ticket(source, lang.code, cls, title, paras, person, epoch, cls)


def _people(rng: random.Random, count: int) -> list[tuple[str, str, str]]:
    """Invented customers: (first name, full name, e-mail at a reserved example domain)."""
    ascii_first = [_ascii(name).lower() for name in FIRST_NAMES]
    ascii_last = [_ascii(name).lower().replace(" ", "") for name in LAST_NAMES]
    people = []
    for i in range(count):
        f, l = _below(rng, len(FIRST_NAMES)), _below(rng, len(LAST_NAMES))
        local = f"{ascii_first[f]}.{ascii_last[l]}"
        if rng.random() < 0.5:
            local += str(i % 97)
        people.append((FIRST_NAMES[f], f"{FIRST_NAMES[f]} {LAST_NAMES[l]}", f"{local}@{_pick(rng, EMAIL_DOMAINS)}"))
    return people


def _typo(text: str, rng: random.Random) -> str | None:
    """``text`` with two neighbouring letters of one longer word swapped, or None if none fits."""
    words = text.split(" ")
    candidates = [i for i, w in enumerate(words) if len(w) >= 6 and w.isalpha()]
    if not candidates:
        return None
    i = candidates[_below(rng, len(candidates))]
    w = words[i]
    j = _between(rng, 1, len(w) - 2)
    if w[j] == w[j + 1]:
        return None
    words[i] = w[:j] + w[j + 1] + w[j] + w[j + 2:]
    return " ".join(words)


def _copy(ticket: Ticket, source: str, epoch: int) -> Ticket:
    return Ticket(source=source, lang=ticket.lang, cls=ticket.cls, title=ticket.title,
                  paras=list(ticket.paras), person=ticket.person, epoch=epoch, label=ticket.label)


def _other_class(rng: random.Random, cls: str) -> str:
    keys = [k for k, _, _ in CLASSES if k != cls and k not in RARE]
    return _pick(rng, keys)


def make_tickets(rows: int, seed: int) -> list[Ticket]:
    """All tickets of one demo, originals and copies, in no particular order."""
    rng = random.Random(seed)
    sources = [s for s, c in zip(SOURCES, exact_counts([SOURCE_SHARES[s] for s in SOURCES], rows)) for _ in range(c)]
    rng.shuffle(sources)

    n_exact, n_near = _share(rows, EXACT_COPY_SHARE), _share(rows, NEAR_COPY_SHARE)
    positions = rng.sample(range(rows), n_exact + n_near) if rows > 3 else []
    copies = set(positions)  # positions[:n_exact] become exact copies, the rest near copies
    originals = [i for i in range(rows) if i not in copies]

    # Classes for the originals, exactly in proportion; the rare ones stay English.
    classes = [k for (k, _, _), c in zip(CLASSES, exact_counts([s for _, _, s in CLASSES], len(originals)))
               for _ in range(c)]
    rng.shuffle(classes)
    people = _people(rng, max(20, rows // 3))
    # Pool sizes (no source): large enough that a million tickets rarely repeat a text by chance.
    pools = {code: _slot_pool(rng, lang, min(4096, rows) if code == "en" else min(1024, max(64, rows // 10)))
             for code, lang in LANGUAGES.items()}
    foreign_codes = [code for code, _ in FOREIGN_LANGUAGES]
    foreign_weights = [w for _, w in FOREIGN_LANGUAGES]

    tickets: dict[int, Ticket] = {}
    for i, cls in zip(originals, classes):
        source = sources[i]
        code = "en"
        if cls not in RARE and rng.random() < FOREIGN_SHARE[source]:
            code = rng.choices(foreign_codes, foreign_weights)[0]
        epoch = START_EPOCH + _below(rng, SPAN_SECONDS)
        tickets[i] = _write_ticket(rng, source, LANGUAGES[code], pools[code], cls, _pick(rng, people), epoch)

    # Copies. A chat export has no title, so a chat ticket can only equal another chat ticket.
    chat_originals = [i for i in originals if sources[i] == "chat"]
    other_originals = [i for i in originals if sources[i] != "chat"]
    exact_bases: set[int] = set()
    copied: set[int] = set()
    for p in positions[:n_exact]:
        pool = chat_originals if sources[p] == "chat" else other_originals
        base = pool[_below(rng, len(pool))]
        exact_bases.add(base)
        copied.add(base)
        t = _copy(tickets[base], sources[p], tickets[base].epoch + _between(rng, 300, 3 * 86400))
        if rng.random() < LABEL_CONFLICT_SHARE:
            t.label = _other_class(rng, t.cls)
        options = ["case", "spaces", "invisible"] + (["html"] if t.source == "webform" else [])
        t.variations = tuple(rng.sample(options, _between(rng, 1, 3)))
        tickets[p] = t
    for p in positions[n_exact:]:
        pool = chat_originals if sources[p] == "chat" else other_originals
        base = pool[_below(rng, len(pool))]
        copied.add(base)
        original = tickets[base]
        lang = LANGUAGES[original.lang]
        t = _copy(original, sources[p], original.epoch + _between(rng, 3600, 5 * 86400))
        if rng.random() < NEAR_CONFLICT_SHARE:
            t.label = _other_class(rng, t.cls)
        kinds = ["signature", "extra", "typo"] + (["reply"] if t.source != "chat" else [])
        kind = _pick(rng, kinds)
        if kind == "typo" and base not in exact_bases:
            # The original had a typo that the customer fixed when writing again.
            body_index = 1 if len(original.paras) > 1 and original.paras[0] in lang.greetings else 0
            typo = _typo(original.paras[body_index], rng)
            if typo is not None:
                original.paras[body_index] = typo
            else:
                kind = "extra"
        elif kind == "typo":
            kind = "extra"
        if kind == "reply":
            t.title = lang.reply_prefix + t.title
        elif kind == "signature":
            t.paras.append(_pick(rng, lang.signatures).format(name=t.person[1]))
        elif kind == "extra":
            t.paras.insert(len(t.paras) - (1 if len(t.paras) > 2 else 0), _pick(rng, lang.extras))
        tickets[p] = t

    # Missing labels anywhere; empty texts only on tickets no copy refers to.
    for i in rng.sample(range(rows), _share(rows, MISSING_LABEL_SHARE)):
        tickets[i].label = None
        tickets[i].missing_kind = _below(rng, 4)
    free = [i for i in originals if i not in copied]
    n_empty, n_body = _share(rows, EMPTY_TEXT_SHARE), _share(rows, EMPTY_BODY_SHARE)
    chosen = rng.sample(free, min(len(free), n_empty + n_body))
    for i in chosen[:n_empty]:
        tickets[i].empty = "all"
    for i in chosen[n_empty:]:
        tickets[i].empty = "body" if tickets[i].source != "chat" else "all"
    return [tickets[i] for i in range(rows)]


# ---------------------------------------------------------------------------------------------
# Writing each source in its own shape


def _disguise(t: Ticket, rng: random.Random, *, latin1: bool) -> tuple[str, list[str]]:
    """Apply an exact copy's disguises; all of them vanish under NFKC, case folding and whitespace collapse."""
    title, paras = t.title, list(t.paras)
    for v in t.variations:
        if v == "case":
            if t.lang == "en" and rng.random() < 0.5:
                title = title.upper()
            else:
                paras = [p.lower() for p in paras]
        elif v == "spaces":
            title = "  " + title + " "
            paras = [p.replace(". ", ".  ", 1) + "  " for p in paras]
        elif v == "invisible":
            # NO-BREAK SPACE is in latin-1; ZERO WIDTH SPACE is not, so the legacy file gets only the former.
            paras[-1] = paras[-1].replace(" ", "\u00a0", 2)
            if not latin1:
                title = title.replace(" ", " \u200b", 1)
    return title, paras


def _labels(t: Ticket, source: str, rng: random.Random) -> str | None:
    """The label as this source spells it: each tool had its own habits."""
    if t.label is None:
        return {"desk": ("", "", "n/a", "N/A"), "webform": (None, None, "n/a", ""),
                "chat": (None, None, None, "n/a"), "legacy": ("", "-", "n/a", "")}[source][t.missing_kind]
    name = DISPLAY[t.label]
    r = rng.random()
    if source == "desk":
        return name + " " if r < 0.1 else name
    if source == "webform":
        return name.lower() + (" " if r < 0.15 else "")
    if source == "chat":
        return name.upper() if r < 0.7 else name
    return name.lower() if r < 0.35 else name


def _formatted_times(epochs: list[int], fmt: str) -> list[str]:
    return pl.from_epoch(pl.Series(epochs, dtype=pl.Int64), time_unit="s").dt.strftime(fmt).to_list()


def _by_time(tickets: list[Ticket], source: str) -> list[Ticket]:
    rows = [t for t in tickets if t.source == source]
    rows.sort(key=lambda t: t.epoch)  # stable: ties keep generation order
    return rows


def write_desk(tickets: list[Ticket], path: Path, rng: random.Random, first: int = 0) -> int:
    """UTF-8 with BOM, CRLF, RFC 4180 quoting (the csv module's minimal quoting), multi-line bodies."""
    rows = _by_time(tickets, "desk")
    day_first = _formatted_times([t.epoch for t in rows], "%d/%m/%Y %H:%M")
    iso = _formatted_times([t.epoch for t in rows], "%Y-%m-%d %H:%M")
    channels = ("Phone", "Email", "Email", "Walk-in", "Social")
    buffer = io.StringIO(newline="")
    writer = csv.writer(buffer, lineterminator="\r\n", quoting=csv.QUOTE_MINIMAL)
    writer.writerow(["Case Number", "Subject Line", "Full Text", "Team", "Opened At", "Channel", "Requester"])
    for n, t in enumerate(rows):
        title, paras = _disguise(t, rng, latin1=False)
        body = ("\r\n\r\n" if rng.random() < 0.3 else "\r\n").join(p.replace("\n", "\r\n") for p in paras)
        if t.empty == "all":
            title, body = ("", "") if rng.random() < 0.5 else ("  ", " ")
        elif t.empty == "body":
            body = ""
        # The desk tool switched to ISO dates for a while: one source, two formats.
        opened = iso[n] if rng.random() < 0.05 else day_first[n]
        writer.writerow([f"CS-{100000 + first + n}", title, body, _labels(t, "desk", rng), opened,
                         _pick(rng, channels), t.person[2] if rng.random() < 0.9 else ""])
    path.write_bytes(buffer.getvalue().encode("utf-8-sig"))
    return len(rows)


# HTML 4 named entities ("&" first, so that no entity is escaped twice).
_ESCAPES = (("&", "&amp;"), ("<", "&lt;"), (">", "&gt;"))
_ENTITIES = _ESCAPES + (("é", "&eacute;"), ("è", "&egrave;"), ("ü", "&uuml;"), ("ñ", "&ntilde;"),
                        ("à", "&agrave;"), ("ö", "&ouml;"), ("ß", "&szlig;"), ("£", "&pound;"))


def _escape(text: str, table: tuple[tuple[str, str], ...]) -> str:
    # Chained str.replace: several times faster than str.translate with a dict.
    for char, entity in table:
        if char in text:
            text = text.replace(char, entity)
    return text



def write_webform(tickets: list[Ticket], path: Path, rng: random.Random, first: int = 0) -> int:
    """JSON Lines; HTML in some bodies; nulls and missing keys; a few lines that are not JSON."""
    rows = _by_time(tickets, "webform")
    stamps = _formatted_times([t.epoch for t in rows], "%Y-%m-%dT%H:%M:%SZ")
    corrupt = set(rng.sample(range(len(rows)), min(len(rows), _share(len(tickets), CORRUPT_JSON_SHARE))))
    origins = ("help-centre", "in-app", "in-app", "contact-page")
    lines = []
    for n, t in enumerate(rows):
        title, paras = _disguise(t, rng, latin1=False)
        html = "html" in t.variations or rng.random() < 0.4
        if html:
            table = _ENTITIES if ("html" in t.variations or rng.random() < 0.5) else _ESCAPES
            paras = [_escape(p, table).replace("\n", "<br>") for p in paras]
            body = "".join(f"<p>{p}</p>" for p in paras) if rng.random() < 0.6 else "<br>\n".join(paras)
        else:
            body = "\n".join(paras)
        record = {"ref": f"WF-{20000 + first + n}", "summary": title, "description": body,
                  "queue": _labels(t, "webform", rng), "ts": stamps[n], "origin": _pick(rng, origins),
                  "contact": t.person[2] if rng.random() < 0.85 else None}
        if t.empty == "all":
            kind = _below(rng, 3)
            if kind == 0:
                del record["summary"], record["description"]
            elif kind == 1:
                record["summary"], record["description"] = None, None
            else:
                record["summary"], record["description"] = "", "<p></p>"
        elif t.empty == "body":
            record["description"] = None if rng.random() < 0.5 else ""
        if t.label is None and t.missing_kind == 0:
            del record["queue"]
        if rng.random() < 0.03:
            del record["ts"]
        if rng.random() < 0.05:
            del record["contact"]
        line = json.dumps(record, ensure_ascii=rng.random() < 0.2)
        if n in corrupt:
            # An export that died mid-line, or a record written by hand with single quotes.
            line = line[: len(line) // 2] if rng.random() < 0.5 else line.replace('"', "'")
        lines.append(line)
    path.write_bytes(("\n".join(lines) + "\n").encode("utf-8"))
    return len(rows)


def write_chat(tickets: list[Ticket], path: Path, rng: random.Random, first: int = 0) -> int:
    """Parquet: no title column, the first message as body, a real UTC timestamp type."""
    rows = _by_time(tickets, "chat")
    bodies, topics, emails, widgets = [], [], [], []
    for t in rows:
        _, paras = _disguise(t, rng, latin1=False)
        # People type into a chat box: no greeting line breaks, the odd emoji.
        body = (" " if rng.random() < 0.7 else "\n").join(paras)
        if t.empty == "all":
            body = (None, "", "   ")[_below(rng, 3)]
        elif not t.variations and rng.random() < 0.05:
            body += " \U0001F64F"
        bodies.append(body)
        topics.append(_labels(t, "chat", rng))
        emails.append(t.person[2] if rng.random() < 0.6 else None)
        widgets.append("in-app" if rng.random() < 0.65 else "website")
    frame = pl.DataFrame(
        {
            "conversation_id": pl.Series([880_000_000 + 7 * (first + n) for n in range(len(rows))], dtype=pl.Int64),
            "first_message": pl.Series(bodies, dtype=pl.String),
            "topic": pl.Series(topics, dtype=pl.String),
            "started_at": pl.from_epoch(pl.Series([t.epoch for t in rows], dtype=pl.Int64), time_unit="s")
            .dt.replace_time_zone("UTC"),
            "customer_email": pl.Series(emails, dtype=pl.String),
            "widget": pl.Series(widgets, dtype=pl.String),
        }
    )
    frame.write_parquet(path, compression="zstd", compression_level=9, statistics=False)
    return len(rows)


def write_legacy(tickets: list[Ticket], path: Path, rng: random.Random, first: int = 0) -> int:
    """latin-1, tab separated, one line per record, no quoting; a stray tab breaks a row or two."""
    rows = _by_time(tickets, "legacy")
    stamps = _formatted_times([t.epoch for t in rows], "%Y-%m-%d %H:%M:%S")
    stray = set(rng.sample(range(len(rows)), min(len(rows), _share(len(tickets), STRAY_TAB_SHARE))))
    media = ("TEL", "MAIL", "SHOP", "MAIL")
    lines = ["TICKET_NO\tHEADLINE\tDESCRIPTION\tCATEGORY\tCREATED\tMEDIUM\tEMAIL"]
    for n, t in enumerate(rows):
        title, paras = _disguise(t, rng, latin1=True)
        body = " ".join(p.replace("\n", " ") for p in paras)
        if t.empty == "all":
            title, body = "", ""
        elif t.empty == "body":
            body = ""
        if n in stray:
            body = body.replace(" ", "\t", 1)  # pasted from a spreadsheet: the row now has a field too many
        email = t.person[2] if rng.random() < 0.7 else ""
        lines.append("\t".join((f"L{700000 + first + n}", title, body, _labels(t, "legacy", rng) or "",
                                stamps[n], _pick(rng, media), email)))
    # strict: a character outside latin-1 is a bug in the templates, not something to hide.
    path.write_bytes(("\n".join(lines) + "\n").encode("latin-1"))
    return len(rows)


WRITERS = {"desk": write_desk, "webform": write_webform, "chat": write_chat, "legacy": write_legacy}


def generate(*, rows: int = DEFAULT_ROWS, seed: int = DEFAULT_SEED, out: Path = DEFAULT_OUT,
             add_rows: int = 0) -> dict[str, int]:
    """Write the four exports into ``out``; return the number of records per file.

    ``add_rows`` > 0 makes a *later* export: the same files as without it, byte for byte in every
    old record, followed by ``add_rows`` newer records (opened after the old ones, generated with
    seed ``seed + 1``) appended to each file with ids that continue the old numbering. Rows keep
    their ``row_id`` across the two versions, so ``prep compare`` can match them.
    """
    if add_rows:
        if add_rows < 20:
            raise ValueError(f"--add-rows must be at least 20 so that every source gets rows; got {add_rows}.")
        counts = generate(rows=rows, seed=seed, out=out)
        return _append_later(counts, rows=add_rows, seed=seed + 1, out=out)
    if rows < 20:
        raise ValueError(f"--rows must be at least 20 so that every source gets rows; got {rows}.")
    # Millions of small objects that all live to the end: the cyclic collector would only rescan them.
    collecting = gc.isenabled()
    gc.disable()
    try:
        tickets = make_tickets(rows, seed)
        out.mkdir(parents=True, exist_ok=True)
        counts = {}
        for index, source in enumerate(SOURCES):
            # One generator per file, so that a change in one writer leaves the other files alone.
            counts[source] = WRITERS[source](tickets, out / FILE_NAMES[source], random.Random(seed * 31 + index))
    finally:
        if collecting:
            gc.enable()
    return counts


def _append_later(counts: dict[str, int], *, rows: int, seed: int, out: Path) -> dict[str, int]:
    """Append ``rows`` newer records to the four files in ``out`` (see :func:`generate`)."""
    import tempfile

    tickets = make_tickets(rows, seed)
    for t in tickets:
        t.epoch += SPAN_SECONDS          # the later export covers the two years after the first
    total = {}
    with tempfile.TemporaryDirectory() as tmp:
        for index, source in enumerate(SOURCES):
            part = Path(tmp) / FILE_NAMES[source]
            added = WRITERS[source](tickets, part, random.Random(seed * 31 + index), first=counts[source])
            target = out / FILE_NAMES[source]
            if source == "chat":
                frame = pl.concat([pl.read_parquet(target), pl.read_parquet(part)], how="vertical")
                frame.write_parquet(target, compression="zstd", compression_level=9, statistics=False)
            else:
                data = part.read_bytes()
                if source == "desk":
                    data = data.removeprefix("\ufeff".encode("utf-8"))
                    data = data[data.index(b"\r\n") + 2:]      # the header ends at the first CRLF
                elif source == "legacy":
                    data = data[data.index(b"\n") + 1:]
                with target.open("ab") as handle:
                    handle.write(data)
            total[source] = counts[source] + added
    return total


def main(argv: Sequence[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description="Generate the invented Nimbrel Rides support-ticket exports.")
    parser.add_argument("--rows", type=int, default=DEFAULT_ROWS, help=f"total records (default {DEFAULT_ROWS})")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED, help=f"random seed (default {DEFAULT_SEED})")
    parser.add_argument("--out", type=Path, default=DEFAULT_OUT, help="output folder (default: exports/ beside this script)")
    parser.add_argument("--add-rows", type=int, default=0,
                        help="make a later export: the same records plus this many newer ones appended (default 0)")
    args = parser.parse_args(argv)
    counts = generate(rows=args.rows, seed=args.seed, out=args.out, add_rows=args.add_rows)
    print(", ".join(f"{FILE_NAMES[s]}: {counts[s]} records" for s in SOURCES))


if __name__ == "__main__":
    main()
